package calib

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"sort"

	"github.com/mottledic/mottle/pkg/imageio"
)

// Reason says why an image was rejected.
type Reason string

// Rejection reasons.
const (
	NotFound    Reason = "target not found"
	NoMarker    Reason = "orientation marker not seen"
	TooFew      Reason = "too few target points"
	TooOblique  Reason = "target too oblique"
	MotionBlur  Reason = "motion blur"
	WrongTarget Reason = "target does not match the target file"
)

// RejectError is returned by Detect when an image cannot be used; Reason
// tells the case, Detail what was seen and what would work.
type RejectError struct {
	Reason Reason
	Detail string
}

// Error returns the reason and the detail.
func (e *RejectError) Error() string { return string(e.Reason) + ": " + e.Detail }

func reject(r Reason, format string, a ...any) error {
	return &RejectError{Reason: r, Detail: fmt.Sprintf(format, a...)}
}

// DetectOptions tune Detect. Zero fields mean their defaults.
type DetectOptions struct {
	// MinPoints is the fewest features an image must show. Default 12.
	MinPoints int
	// MaxTilt is the largest tilt of the target from square-on, degrees,
	// estimated from its foreshortening. Default 65.
	MaxTilt float64
	// MaxBlurRatio is the largest ratio of edge widths along the two grid
	// directions of a checkerboard before the image is taken as
	// motion-blurred (with the wider edges over 2.5 px). Default 2.
	MaxBlurRatio float64
}

func (o DetectOptions) withDefaults() DetectOptions {
	if o.MinPoints == 0 {
		o.MinPoints = 12
	}
	if o.MaxTilt == 0 {
		o.MaxTilt = 65
	}
	if o.MaxBlurRatio == 0 {
		o.MaxBlurRatio = 2
	}
	return o
}

// Observation is a target feature found in an image.
type Observation struct {
	Feature
	// Px, Py is the measured image position, px.
	Px float64 `json:"x_px"`
	Py float64 `json:"y_px"`
}

// Detection is what Detect found in one image.
type Detection struct {
	Points []Observation
	// Tilt is the tilt of the target estimated from its foreshortening, °.
	Tilt float64
	// EdgeWidth is the median edge width along the two grid directions, px
	// (checkerboards only).
	EdgeWidth [2]float64
}

// gridImg is an image as float64 with its size.
type gridImg struct {
	w, h int
	p    []float64
}

func fromGray(g *imageio.Gray) gridImg {
	m := gridImg{w: g.W, h: g.H, p: make([]float64, g.W*g.H)}
	for y := range g.H {
		for x := range g.W {
			m.p[y*g.W+x] = float64(g.Pix[y*g.Stride+x])
		}
	}
	return m
}

func (m gridImg) at(x, y int) float64 {
	x = max(0, min(m.w-1, x))
	y = max(0, min(m.h-1, y))
	return m.p[y*m.w+x]
}

// bilinear samples m at a continuous position.
func (m gridImg) bilinear(x, y float64) float64 {
	x0, y0 := math.Floor(x), math.Floor(y)
	fx, fy := x-x0, y-y0
	ix, iy := int(x0), int(y0)
	return (1-fy)*((1-fx)*m.at(ix, iy)+fx*m.at(ix+1, iy)) + fy*((1-fx)*m.at(ix, iy+1)+fx*m.at(ix+1, iy+1))
}

// gauss returns m smoothed by a Gaussian of standard deviation s (cut at 3s).
func (m gridImg) gauss(s float64) gridImg {
	r := int(math.Ceil(3 * s))
	k := make([]float64, 2*r+1)
	var sum float64
	for i := range k {
		d := float64(i - r)
		k[i] = math.Exp(-d * d / (2 * s * s))
		sum += k[i]
	}
	for i := range k {
		k[i] /= sum
	}
	tmp := gridImg{w: m.w, h: m.h, p: make([]float64, len(m.p))}
	for y := range m.h {
		for x := range m.w {
			var v float64
			for i, w := range k {
				v += w * m.at(x+i-r, y)
			}
			tmp.p[y*m.w+x] = v
		}
	}
	out := gridImg{w: m.w, h: m.h, p: make([]float64, len(m.p))}
	for y := range m.h {
		for x := range m.w {
			var v float64
			for i, w := range k {
				v += w * tmp.at(x, y+i-r)
			}
			out.p[y*m.w+x] = v
		}
	}
	return out
}

// Detect finds the features of target t in the image g, to sub-pixel
// accuracy, and identifies each by the target's orientation marker. It
// returns a *RejectError when the image cannot be used (target not found,
// marker not seen, too few points, too oblique, motion blur).
func Detect(g *imageio.Gray, t *Target, o DetectOptions) (*Detection, error) {
	if g == nil || g.W < 16 || g.H < 16 {
		return nil, errors.New("detect: image missing or smaller than 16×16 px")
	}
	if err := t.check(); err != nil {
		return nil, err
	}
	o = o.withDefaults()
	img := fromGray(g)
	var d *Detection
	var err error
	switch t.Kind {
	case Checkerboard:
		d, err = detectChecker(img, t, o)
	default:
		d, err = detectDots(img, t, o)
	}
	if err != nil {
		return nil, err
	}
	if len(d.Points) < o.MinPoints {
		return nil, reject(TooFew, "%d of the target's %d points identified, %d needed: show more of the target", len(d.Points), len(t.Features()), o.MinPoints)
	}
	tilt, err := foreshortening(d.Points)
	if err != nil {
		return nil, err
	}
	d.Tilt = tilt
	if tilt > o.MaxTilt {
		return nil, reject(TooOblique, "the target is tilted about %.0f° from square-on; keep it within %.0f°", tilt, o.MaxTilt)
	}
	sort.Slice(d.Points, func(a, b int) bool {
		pa, pb := d.Points[a], d.Points[b]
		if pa.J != pb.J {
			return pa.J < pb.J
		}
		return pa.I < pb.I
	})
	return d, nil
}

// foreshortening returns the tilt (°) of the target from the local affine
// map of a homography from the plane to the image at the points' centroid:
// the ratio of its singular values is about cos(tilt).
func foreshortening(pts []Observation) (float64, error) {
	src := make([][2]float64, len(pts))
	dst := make([][2]float64, len(pts))
	var cx, cy float64
	for k, p := range pts {
		src[k] = [2]float64{p.X, p.Y}
		dst[k] = [2]float64{p.Px, p.Py}
		cx += p.X
		cy += p.Y
	}
	cx /= float64(len(pts))
	cy /= float64(len(pts))
	H, err := homography(src, dst)
	if err != nil {
		return 0, reject(NotFound, "the points found do not form a plane grid (%v)", err)
	}
	// Jacobian of the homography at (cx, cy).
	w := H[2][0]*cx + H[2][1]*cy + H[2][2]
	x := (H[0][0]*cx + H[0][1]*cy + H[0][2]) / w
	y := (H[1][0]*cx + H[1][1]*cy + H[1][2]) / w
	a := (H[0][0] - x*H[2][0]) / w
	b := (H[0][1] - x*H[2][1]) / w
	c := (H[1][0] - y*H[2][0]) / w
	d := (H[1][1] - y*H[2][1]) / w
	// Singular values of [[a b][c d]].
	s1s2 := math.Abs(a*d - b*c)
	f := a*a + b*b + c*c + d*d
	disc := math.Sqrt(math.Max(0, f*f-4*s1s2*s1s2))
	s1 := math.Sqrt((f + disc) / 2)
	s2 := s1s2 / s1
	return math.Acos(math.Min(1, s2/s1)) * 180 / math.Pi, nil
}

// refineSigma is the Gaussian smoothing (px) before the gradients of the
// corner refinement: it widens edge profiles so the sampled estimator is
// not drawn toward pixel centres.
const refineSigma = 1.5

// gridTilt rejects a grid (grid positions → image positions) whose
// foreshortening says it is tilted more than o.MaxTilt; the grid indices
// stand in for plane coordinates, which only differ by a rotation and scale.
func gridTilt(pos map[[2]int][2]float64, o DetectOptions) error {
	if len(pos) < 4 {
		return nil
	}
	var pts []Observation
	for _, key := range sortedKeys(pos) {
		p := pos[key]
		pts = append(pts, Observation{Feature: Feature{X: float64(key[0]), Y: float64(key[1])}, Px: p[0], Py: p[1]})
	}
	tilt, err := foreshortening(pts)
	if err != nil {
		return err
	}
	if tilt > o.MaxTilt {
		return reject(TooOblique, "the target is tilted about %.0f° from square-on; keep it within %.0f°", tilt, o.MaxTilt)
	}
	return nil
}

// candidate is a feature candidate: position and strength.
type candidate struct {
	x, y, s float64
}

// detectChecker finds checkerboard inner corners: saddle points of the
// smoothed image (Hessian determinant negative), ordered into a grid,
// refined by the gradient-orthogonality estimator (Förstner & Gülch 1987,
// "A fast operator for detection and precise location of distinct points,
// corners and centres of circular features", ISPRS Intercommission Conf.),
// identified by the marker squares.
func detectChecker(img gridImg, t *Target, o DetectOptions) (*Detection, error) {
	s := img.gauss(1.5)
	w, h := img.w, img.h
	resp := make([]float64, w*h)
	var rmax float64
	for y := 2; y < h-2; y++ {
		for x := 2; x < w-2; x++ {
			ixx := s.p[y*w+x+1] - 2*s.p[y*w+x] + s.p[y*w+x-1]
			iyy := s.p[(y+1)*w+x] - 2*s.p[y*w+x] + s.p[(y-1)*w+x]
			ixy := (s.p[(y+1)*w+x+1] - s.p[(y-1)*w+x+1] - s.p[(y+1)*w+x-1] + s.p[(y-1)*w+x-1]) / 4
			r := ixy*ixy - ixx*iyy
			if r > 0 {
				resp[y*w+x] = r
				rmax = math.Max(rmax, r)
			}
		}
	}
	if rmax == 0 {
		return nil, reject(NotFound, "no checkerboard corners in the image")
	}
	var cands []candidate
	const nms = 3
	for y := 3; y < h-3; y++ {
		for x := 3; x < w-3; x++ {
			r := resp[y*w+x]
			if r < 0.02*rmax {
				continue
			}
			peak := true
			for dy := -nms; dy <= nms && peak; dy++ {
				for dx := -nms; dx <= nms; dx++ {
					q := resp[(y+dy)*w+x+dx]
					if q > r || (q == r && (dy < 0 || (dy == 0 && dx < 0))) {
						peak = false
						break
					}
				}
			}
			if peak {
				cands = append(cands, candidate{float64(x), float64(y), r})
			}
		}
	}
	if len(cands) > 20000 {
		sort.SliceStable(cands, func(a, b int) bool { return cands[a].s > cands[b].s })
		cands = cands[:20000]
	}
	grid, step, err := growGrid(cands)
	if err != nil {
		return nil, err
	}
	// Drop weak junctions (the board's outer edge) against the grid's median.
	var strengths []float64
	for _, k := range grid {
		strengths = append(strengths, cands[k].s)
	}
	med := median(strengths)
	for key, k := range grid {
		if cands[k].s < 0.25*med {
			delete(grid, key)
		}
	}
	gx, gy := gradients(img.gauss(refineSigma))
	r := math.Max(3, math.Min(15, 0.3*step))
	pos := map[[2]int][2]float64{}
	for key, k := range grid {
		x, y, ok := refineCorner(gx, gy, cands[k].x, cands[k].y, r)
		if ok {
			pos[key] = [2]float64{x, y}
		}
	}
	if err := gridTilt(pos, o); err != nil {
		return nil, err
	}
	// Marker cells: dark body, light centre.
	type cell struct {
		key    [2]int
		c      [2]float64
		body   float64
		centre float64
	}
	cells := map[[2]int]*cell{}
	for key, p00 := range pos {
		p10, ok1 := pos[[2]int{key[0] + 1, key[1]}]
		p01, ok2 := pos[[2]int{key[0], key[1] + 1}]
		p11, ok3 := pos[[2]int{key[0] + 1, key[1] + 1}]
		if !ok1 || !ok2 || !ok3 {
			continue
		}
		c := [2]float64{(p00[0] + p10[0] + p01[0] + p11[0]) / 4, (p00[1] + p10[1] + p01[1] + p11[1]) / 4}
		var body float64
		for _, p := range [][2]float64{p00, p10, p01, p11} {
			body += img.bilinear(c[0]+0.55*(p[0]-c[0]), c[1]+0.55*(p[1]-c[1])) / 4
		}
		var centre float64
		for dy := -1; dy <= 1; dy++ {
			for dx := -1; dx <= 1; dx++ {
				centre += img.bilinear(c[0]+0.5*float64(dx), c[1]+0.5*float64(dy)) / 9
			}
		}
		cells[key] = &cell{key: key, c: c, body: body, centre: centre}
	}
	var marks [][2]float64 // marker cell centres in grid units
	var markImg [][2]float64
	var maxContrast float64
	contrast := map[[2]int]float64{}
	for key, c := range cells {
		light := math.Inf(-1)
		for _, d := range [][2]int{{1, 0}, {-1, 0}, {0, 1}, {0, -1}} {
			if n, ok := cells[[2]int{key[0] + d[0], key[1] + d[1]}]; ok {
				light = math.Max(light, n.body)
			}
		}
		if math.IsInf(light, -1) {
			continue
		}
		contrast[key] = light - c.body
		maxContrast = math.Max(maxContrast, light-c.body)
	}
	keys := make([][2]int, 0, len(cells))
	for key := range cells {
		keys = append(keys, key)
	}
	slices.SortFunc(keys, cmpKey)
	for _, key := range keys {
		c := cells[key]
		con, ok := contrast[key]
		if !ok || con < 0.3*maxContrast {
			continue
		}
		if c.centre-c.body > 0.4*con {
			marks = append(marks, [2]float64{float64(key[0]) + 0.5, float64(key[1]) + 0.5})
			markImg = append(markImg, c.c)
		}
	}
	// Target square centre of the marker origin.
	m0 := [2]float64{float64(t.Marker[0][0]) + 0.5, float64(t.Marker[0][1]) + 0.5}
	idx, err := identify(marks, markImg, float64(t.arm()), m0)
	if err != nil {
		return nil, err
	}
	d := &Detection{}
	for _, key := range sortedKeys(pos) {
		p := pos[key]
		i, j, ok := idx([2]float64{float64(key[0]), float64(key[1])})
		if !ok {
			continue
		}
		f, ok := t.feature(i, j)
		if !ok {
			continue
		}
		d.Points = append(d.Points, Observation{Feature: f, Px: p[0], Py: p[1]})
	}
	d.EdgeWidth = edgeWidths(img, pos)
	wa, wb := d.EdgeWidth[0], d.EdgeWidth[1]
	if wa > 0 && wb > 0 {
		hi, lo := math.Max(wa, wb), math.Min(wa, wb)
		if hi > 2.5 && hi > o.MaxBlurRatio*lo {
			return nil, reject(MotionBlur, "edges are %.1f px wide one way and %.1f px the other; steady the camera or shorten the exposure", hi, lo)
		}
	}
	return d, nil
}

func cmpKey(a, b [2]int) int {
	if a[1] != b[1] {
		return a[1] - b[1]
	}
	return a[0] - b[0]
}

func sortedKeys[V any](m map[[2]int]V) [][2]int {
	keys := make([][2]int, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	slices.SortFunc(keys, cmpKey)
	return keys
}

func median(v []float64) float64 {
	if len(v) == 0 {
		return 0
	}
	s := slices.Clone(v)
	slices.Sort(s)
	n := len(s)
	if n%2 == 1 {
		return s[n/2]
	}
	return (s[n/2-1] + s[n/2]) / 2
}

// gradients returns central-difference gradients of img.
func gradients(img gridImg) (gx, gy gridImg) {
	gx = gridImg{w: img.w, h: img.h, p: make([]float64, len(img.p))}
	gy = gridImg{w: img.w, h: img.h, p: make([]float64, len(img.p))}
	for y := range img.h {
		for x := range img.w {
			gx.p[y*img.w+x] = (img.at(x+1, y) - img.at(x-1, y)) / 2
			gy.p[y*img.w+x] = (img.at(x, y+1) - img.at(x, y-1)) / 2
		}
	}
	return gx, gy
}

// refineCorner finds the point q minimising Σ w (g·(q − p))² over a
// Gaussian window of radius r around the estimate: the point every image
// gradient near a corner is orthogonal to (Förstner & Gülch 1987).
func refineCorner(gx, gy gridImg, x, y, r float64) (float64, float64, bool) {
	sw := r / 2
	qx, qy := x, y
	ri := int(math.Ceil(r))
	for range 30 {
		cx, cy := int(math.Round(qx)), int(math.Round(qy))
		if cx-ri < 1 || cy-ri < 1 || cx+ri > gx.w-2 || cy+ri > gx.h-2 {
			return 0, 0, false
		}
		var a, b, c, bx, by float64
		for py := cy - ri; py <= cy+ri; py++ {
			for px := cx - ri; px <= cx+ri; px++ {
				dx, dy := float64(px)-qx, float64(py)-qy
				d2 := dx*dx + dy*dy
				if d2 > r*r {
					continue
				}
				wt := math.Exp(-d2 / (2 * sw * sw))
				u, v := gx.p[py*gx.w+px], gy.p[py*gx.w+px]
				a += wt * u * u
				b += wt * u * v
				c += wt * v * v
				bx += wt * (u*u*float64(px) + u*v*float64(py))
				by += wt * (u*v*float64(px) + v*v*float64(py))
			}
		}
		det := a*c - b*b
		if !(det > 1e-12*(a+c)*(a+c)) {
			return 0, 0, false
		}
		nx := (c*bx - b*by) / det
		ny := (a*by - b*bx) / det
		moved := math.Hypot(nx-qx, ny-qy)
		qx, qy = nx, ny
		if math.Hypot(qx-x, qy-y) > r {
			return 0, 0, false
		}
		if moved < 1e-5 {
			break
		}
	}
	return qx, qy, true
}

// edgeWidths returns the median width of the edges between neighbouring
// corners along the grid's first and second direction: the step height
// over the largest slope of the profile across the edge (a Gaussian blur
// of σ gives σ√(2π)).
func edgeWidths(img gridImg, pos map[[2]int][2]float64) [2]float64 {
	var ws [2][]float64
	for _, key := range sortedKeys(pos) {
		p := pos[key]
		for a, d := range [][2]int{{1, 0}, {0, 1}} {
			q, ok := pos[[2]int{key[0] + d[0], key[1] + d[1]}]
			if !ok {
				continue
			}
			ex, ey := q[0]-p[0], q[1]-p[1]
			l := math.Hypot(ex, ey)
			if l < 6 {
				continue
			}
			nx, ny := -ey/l, ex/l
			mx, my := (p[0]+q[0])/2, (p[1]+q[1])/2
			half := 0.25 * l
			const st = 0.25
			var vals []float64
			for s := -half; s <= half; s += st {
				vals = append(vals, img.bilinear(mx+s*nx, my+s*ny))
			}
			lo, hi, slope := math.Inf(1), math.Inf(-1), 0.0
			for k, v := range vals {
				lo, hi = math.Min(lo, v), math.Max(hi, v)
				if k > 0 {
					slope = math.Max(slope, math.Abs(v-vals[k-1])/st)
				}
			}
			if slope > 0 && hi-lo > 0 {
				ws[a] = append(ws[a], (hi-lo)/slope)
			}
		}
	}
	return [2]float64{median(ws[0]), median(ws[1])}
}

// identify finds the marker's L among the marked grid positions and
// returns the map from grid positions (grid units) to target indices. m0
// is the target position of the marker origin in the same units.
func identify(marks, img [][2]float64, arm float64, m0 [2]float64) (func(g [2]float64) (int, int, bool), error) {
	if len(marks) < 3 {
		return nil, reject(NoMarker, "%d of the 3 marker elements seen; show the middle of the target, evenly lit", len(marks))
	}
	type cand struct{ o, a, b int }
	var found []cand
	for o := range marks {
		for a := range marks {
			for b := range marks {
				if a == o || b == o || a == b {
					continue
				}
				da := [2]float64{marks[a][0] - marks[o][0], marks[a][1] - marks[o][1]}
				db := [2]float64{marks[b][0] - marks[o][0], marks[b][1] - marks[o][1]}
				la, lb := math.Abs(da[0])+math.Abs(da[1]), math.Abs(db[0])+math.Abs(db[1])
				if math.Abs(la-arm) > 0.01 || math.Abs(lb-arm) > 0.01 || math.Abs(da[0]*db[0]+da[1]*db[1]) > 0.01 {
					continue
				}
				if (da[0] != 0 && da[1] != 0) || (db[0] != 0 && db[1] != 0) {
					continue
				}
				// +X then +Y turn clockwise on screen (x right, y down).
				ia := [2]float64{img[a][0] - img[o][0], img[a][1] - img[o][1]}
				ib := [2]float64{img[b][0] - img[o][0], img[b][1] - img[o][1]}
				if ia[0]*ib[1]-ia[1]*ib[0] <= 0 {
					continue
				}
				found = append(found, cand{o, a, b})
			}
		}
	}
	if len(found) == 0 {
		return nil, reject(NoMarker, "%d marker-like elements seen but not in the marker's L shape; show the middle of the target, evenly lit", len(marks))
	}
	if len(found) > 1 {
		return nil, reject(NoMarker, "%d marker shapes seen; the image may show another target or reflections", len(found))
	}
	c := found[0]
	o := marks[c.o]
	ea := [2]float64{(marks[c.a][0] - o[0]) / arm, (marks[c.a][1] - o[1]) / arm}
	eb := [2]float64{(marks[c.b][0] - o[0]) / arm, (marks[c.b][1] - o[1]) / arm}
	// Grid offset g − o = s ea + t eb; ea, eb are orthogonal unit axis
	// vectors, so s = (g − o)·ea, t = (g − o)·eb.
	return func(g [2]float64) (int, int, bool) {
		dx, dy := g[0]-o[0], g[1]-o[1]
		s := dx*ea[0] + dy*ea[1]
		t := dx*eb[0] + dy*eb[1]
		i, j := math.Round(m0[0]+s), math.Round(m0[1]+t)
		if math.Abs(m0[0]+s-i) > 1e-6 || math.Abs(m0[1]+t-j) > 1e-6 {
			return 0, 0, false
		}
		return int(i), int(j), true
	}, nil
}

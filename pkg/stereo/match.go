package stereo

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strconv"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
	"github.com/mottledic/mottle/pkg/spline"
)

// Options tune Match and Track. The zero value of a field means its
// default.
type Options struct {
	// Correlate are the subset options of every match (Subset, Step, Mask
	// of the left reference image, Search, MinZNCC, Interp, Noise,
	// Threads); Shape defaults to correlate.Second here, which follows the
	// perspective change between the two cameras. Seeds, Start and
	// Progress are not used.
	Correlate correlate.Options
	// MinDepth and MaxDepth bound the epipolar search along each left ray,
	// mm from the left camera. Default: half and twice the depth at which
	// the two optical axes pass closest.
	MinDepth, MaxDepth float64
	// SeedSpacing is the spacing in px of the seed points that are found
	// by search (along the epipolar line for the left–right match, by the
	// integer search of correlate over time); the other points start from
	// the nearest seed. Default 64.
	SeedSpacing int
	// MaxGap is the largest optimal correction of a triangulated pair, px
	// (see Point3.Gap); points beyond it get RaysApart. Default 1.
	MaxGap float64
}

func (o Options) withDefaults(rig *calib.Rig) Options {
	if o.Correlate.Shape == 0 {
		o.Correlate.Shape = correlate.Second
	}
	if o.SeedSpacing == 0 {
		o.SeedSpacing = 64
	}
	if o.MaxGap == 0 {
		o.MaxGap = 1
	}
	if o.MinDepth == 0 || o.MaxDepth == 0 {
		z := axesDepth(rig)
		if o.MinDepth == 0 {
			o.MinDepth = z / 2
		}
		if o.MaxDepth == 0 {
			o.MaxDepth = 2 * z
		}
	}
	return o
}

// Validate reports every problem of o at once.
func (o Options) Validate() error {
	var errs []error
	if err := o.Correlate.Validate(); err != nil {
		errs = append(errs, err)
	}
	if o.MinDepth < 0 || o.MaxDepth < 0 || (o.MaxDepth > 0 && o.MinDepth >= o.MaxDepth) {
		errs = append(errs, fmt.Errorf("stereo: depth range %g–%g mm: want 0 < min < max (0 for the default)", o.MinDepth, o.MaxDepth))
	}
	if o.SeedSpacing < 0 || o.SeedSpacing > 10000 {
		errs = append(errs, fmt.Errorf("stereo: seed spacing %d px: want 1–10000 (0 for the default 64)", o.SeedSpacing))
	}
	if o.MaxGap < 0 || math.IsNaN(o.MaxGap) {
		errs = append(errs, fmt.Errorf("stereo: max gap %g px: want a positive number (0 for the default 1)", o.MaxGap))
	}
	return errors.Join(errs...)
}

// axesDepth returns the left-frame depth of the point where the two
// optical axes pass closest (the working distance of a converging rig);
// for parallel axes, 10 baselines.
func axesDepth(r *calib.Rig) float64 {
	// Left axis: s·(0,0,1). Right axis in the left frame: C + t·d with
	// C = −Rᵀ T and d = Rᵀ e3.
	Rt := transpose(r.R)
	C := mulv(Rt, r.T)
	for i := range C {
		C[i] = -C[i]
	}
	d := [3]float64{Rt[0][2], Rt[1][2], Rt[2][2]}
	// Minimise |s e3 − C − t d|²: [1 −d3; −d3 |d|²][s t] = [C3, −C·d].
	b := d[2]
	den := 1 - b*b
	if den < 1e-9 {
		return 10 * r.Baseline()
	}
	cd := C[0]*d[0] + C[1]*d[1] + C[2]*d[2]
	s := (C[2] - b*cd) / den
	if !(s > 0) {
		return 10 * r.Baseline()
	}
	return s
}

// Status says whether a point was measured in 3D and, if not, why.
type Status uint8

const (
	// OK: matched in both cameras and triangulated.
	OK Status = iota
	// StereoMatch: the left subset was not found in the right reference
	// image (Point.Match tells the 2D reason).
	StereoMatch
	// LeftTrack: not found in the left deformed image.
	LeftTrack
	// RightTrack: not found in the right deformed image.
	RightTrack
	// RaysApart: the two image points are not consistent with the rig
	// (longer optimal correction than Options.MaxGap): a false match or a
	// rig file that does not fit the cameras.
	RaysApart
	// Behind: triangulated behind a camera.
	Behind
	// NoRay: the lens distortion could not be removed at the point.
	NoRay
)

var statusNames = [...]string{"ok", "stereo_match", "left_track", "right_track", "rays_apart", "behind_camera", "no_ray"}

// String returns the status name used in result files.
func (s Status) String() string {
	if int(s) < len(statusNames) {
		return statusNames[s]
	}
	return "Status(" + strconv.Itoa(int(s)) + ")"
}

// MarshalText encodes the status by its name.
func (s Status) MarshalText() ([]byte, error) {
	if int(s) >= len(statusNames) {
		return nil, fmt.Errorf("stereo: unknown status %d", int(s))
	}
	return []byte(statusNames[s]), nil
}

// Point is a material point of the reference state.
type Point struct {
	// X, Y is the left reference position (the subset centre), px.
	X, Y float64
	// XR, YR is where it was found in the right reference image, px.
	XR, YR float64
	// P is the shape function of the left–right match.
	P [12]float64
	// Pos is the 3D position in the left camera's frame, mm; Std its
	// standard deviation per axis, from the match std.
	Pos, Std [3]float64
	// ZNCC of the left–right match; Gap the optimal correction, px.
	ZNCC, Gap float64
	// StdMatch is the predicted std of the right position, px.
	StdMatch float64
	Status   Status
	// Match is the 2D status of the match that failed (correlate.OK when
	// Status is OK or the failure came later).
	Match correlate.Status
}

// Reference is the stereo reference state: the shape.
type Reference struct {
	Grid   correlate.Grid
	Points []Point
	// Options are the options used, defaults filled in.
	Options Options
	tri     *Triangulator
	w, h    int
}

// Triangulator returns the triangulator of the reference's rig.
func (r *Reference) Triangulator() *Triangulator { return r.tri }

// OK returns the number of points with status OK.
func (r *Reference) OK() int {
	n := 0
	for _, p := range r.Points {
		if p.Status == OK {
			n++
		}
	}
	return n
}

// checkPair returns an error if the images of a pair differ in size from
// each other or from the rig.
func checkPair(rig *calib.Rig, l, r *imageio.Gray, what string) error {
	if l == nil || r == nil || l.W == 0 || r.W == 0 {
		return fmt.Errorf("stereo: %s: an image is missing or empty", what)
	}
	if err := rig.Check(l.W, l.H, r.W, r.H); err != nil {
		return fmt.Errorf("stereo: %s: %w", what, err)
	}
	return nil
}

// grid lays the lattice of subset centres over the left image as
// correlate.Run does: the mask's bounding box (the whole image without a
// mask), kept the interpolation margin inside the image.
func grid(w, h int, o correlate.Options) (correlate.Grid, error) {
	m := o.Subset / 2
	bx0, by0, bx1, by1 := 0, 0, w, h
	if o.Mask != nil {
		bx0, by0, bx1, by1 = o.Mask.Bounds()
	}
	e := 2
	if o.Interp == spline.Quintic {
		e = 3
	}
	bx0, by0 = max(bx0, e), max(by0, e)
	bx1, by1 = min(bx1, w-e), min(by1, h-e)
	g := correlate.Grid{X0: bx0 + m, Y0: by0 + m, Step: o.Step}
	if bx1-1-m < g.X0 || by1-1-m < g.Y0 {
		return g, fmt.Errorf("stereo: the region of interest (%d×%d px) is smaller than the %d px subset", bx1-bx0, by1-by0, o.Subset)
	}
	g.Nx = (bx1-1-m-g.X0)/o.Step + 1
	g.Ny = (by1-1-m-g.Y0)/o.Step + 1
	return g, nil
}

// Match finds every left reference subset in the right reference image and
// triangulates it: the reference shape. Seed points (Options.SeedSpacing
// apart) are searched along their epipolar line between MinDepth and
// MaxDepth by ZNCC and refined by IC-GN; every other point starts from the
// shape function of the nearest seed, then failed points are retried from
// their accepted neighbours. It returns an error for unusable input
// (images of different sizes, or not of the rig's size; bad options);
// points that cannot be measured keep a Status.
func Match(ctx context.Context, rig *calib.Rig, left, right *imageio.Gray, o Options) (*Reference, error) {
	tri, err := NewTriangulator(rig)
	if err != nil {
		return nil, err
	}
	if err := checkPair(rig, left, right, "reference pair"); err != nil {
		return nil, err
	}
	if err := o.Validate(); err != nil {
		return nil, err
	}
	o = o.withDefaults(rig)
	co := o.Correlate
	co.Seeds, co.Start, co.Progress = nil, nil, nil
	cf := co
	cf.Interp = max(cf.Interp, spline.Cubic)
	if cf.Subset == 0 {
		cf.Subset = correlate.DefaultSubset
	}
	if cf.Step == 0 {
		cf.Step = correlate.DefaultStep
	}
	g, err := grid(left.W, left.H, cf)
	if err != nil {
		return nil, err
	}
	n := g.Len()
	pts := make([][2]float64, n)
	for j := range g.Ny {
		for i := range g.Nx {
			x, y := g.At(i, j)
			pts[g.Index(i, j)] = [2]float64{float64(x), float64(y)}
		}
	}
	es := newEpiSearch(tri, left, right, cf.Subset/2, o.MinDepth, o.MaxDepth)
	seed := func(k int) ([12]float64, bool) {
		xr, yr, ok := es.search(pts[k][0], pts[k][1])
		var p [12]float64
		p[correlate.U], p[correlate.V] = xr-pts[k][0], yr-pts[k][1]
		return p, ok
	}
	all := make([]int, n)
	for k := range all {
		all[k] = k
	}
	res, err := matchAll(ctx, left, right, pts, all, g, seed, co, o.SeedSpacing)
	if err != nil {
		return nil, err
	}
	ref := &Reference{Grid: g, Points: make([]Point, n), Options: o, tri: tri, w: left.W, h: left.H}
	for k, q := range res {
		p := &ref.Points[k]
		p.X, p.Y, p.P, p.ZNCC = pts[k][0], pts[k][1], q.P, q.ZNCC
		if q.Status != correlate.OK {
			p.Status, p.Match = StereoMatch, q.Status
			continue
		}
		p.XR, p.YR = p.X+q.P[correlate.U], p.Y+q.P[correlate.V]
		p.StdMatch = math.Hypot(q.StdU, q.StdV) / math.Sqrt2
		t, c, st := triangulate(tri, p.X, p.Y, p.XR, p.YR, 0, p.StdMatch, o.MaxGap)
		p.Pos, p.Gap, p.Status = t.X, t.Gap, st
		for i := range 3 {
			p.Std[i] = math.Sqrt(c[i][i])
		}
	}
	return ref, nil
}

// triangulate triangulates one pair and classifies the outcome; c is the
// covariance of the position from the image std sl, sr.
func triangulate(tri *Triangulator, xl, yl, xr, yr, sl, sr, maxGap float64) (Point3, [3][3]float64, Status) {
	t, err := tri.Triangulate(xl, yl, xr, yr, maxGap)
	switch {
	case errors.Is(err, ErrRaysApart):
		return t, [3][3]float64{}, RaysApart
	case errors.Is(err, ErrBehind), errors.Is(err, ErrParallel):
		return t, [3][3]float64{}, Behind
	case err != nil:
		return t, [3][3]float64{}, NoRay
	}
	c, err := tri.Cov(xl, yl, xr, yr, sl, sr)
	if err != nil {
		return t, c, NoRay
	}
	return t, c, OK
}

// runCropped is correlate.RunPoints at the points ks of pts, on the part of
// the images that those subsets can reach (their reference subsets, the
// guesses' subsets and the integer search around each point, with a margin
// for the spline and the prefilter), so that the cost of preparing the
// images follows the points, not the image size. The B-spline prefilter's
// influence decays as 0.43ⁿ over n px (quintic; 0.27ⁿ cubic: Unser 1999,
// "Splines: a perfect fit for signal and image processing", IEEE Signal
// Process. Mag. 16(6):22), so a margin of 24 px changes the result by
// less than 1e-8 of the grey levels.
func runCropped(ctx context.Context, ref, def *imageio.Gray, pts [][2]float64, ks []int, guesses [][12]float64, co correlate.Options) ([]correlate.Point, error) {
	m := co.Subset / 2
	if m == 0 {
		m = correlate.DefaultSubset / 2
	}
	s := co.Search
	if s == 0 {
		s = correlate.DefaultSearch
	}
	pad := float64(m + 24 + int(math.Ceil(4*co.Prefilter)))
	x0, y0, x1, y1 := math.Inf(1), math.Inf(1), math.Inf(-1), math.Inf(-1)
	grow := func(x, y, r float64) {
		x0, y0 = math.Min(x0, x-r), math.Min(y0, y-r)
		x1, y1 = math.Max(x1, x+r), math.Max(y1, y+r)
	}
	for a, k := range ks {
		x, y := pts[k][0], pts[k][1]
		grow(x, y, pad+float64(s))
		if guesses != nil {
			// A second-order guess can reach beyond its displacement at
			// the subset's corners: take its largest corner offset.
			g := guesses[a]
			r := 0.0
			for _, c := range [4][2]float64{{-1, -1}, {1, -1}, {-1, 1}, {1, 1}} {
				u, v := correlate.Displacement(&g, c[0]*float64(m), c[1]*float64(m))
				r = math.Max(r, math.Max(math.Abs(u-g[correlate.U]), math.Abs(v-g[correlate.V])))
			}
			grow(x+g[correlate.U], y+g[correlate.V], pad+r)
		}
	}
	cx0, cy0 := max(0, int(math.Floor(x0))), max(0, int(math.Floor(y0)))
	cx1, cy1 := min(ref.W, int(math.Ceil(x1))+1), min(ref.H, int(math.Ceil(y1))+1)
	if cx0 >= cx1 || cy0 >= cy1 || math.IsNaN(x0) || math.IsNaN(x1) {
		cx0, cy0, cx1, cy1 = 0, 0, ref.W, ref.H
	}
	w, h := cx1-cx0, cy1-cy0
	o := co
	if co.Mask != nil {
		g := imageio.NewGray(w, h)
		any := false
		for y := range h {
			for x := range w {
				if co.Mask.Inside(cx0+x, cy0+y) {
					g.Set(x, y, 1)
					any = true
				}
			}
		}
		out := make([]correlate.Point, len(ks))
		if !any {
			for a, k := range ks {
				out[a].X, out[a].Y, out[a].Status = pts[k][0], pts[k][1], correlate.Outside
			}
			return out, nil
		}
		mk, err := roi.FromImage(g, w, h)
		if err != nil {
			return nil, err
		}
		o.Mask = mk
	}
	p := make([][2]float64, len(ks))
	for a, k := range ks {
		p[a] = [2]float64{pts[k][0] - float64(cx0), pts[k][1] - float64(cy0)}
	}
	r, err := correlate.RunPoints(ctx, ref.Sub(cx0, cy0, w, h), def.Sub(cx0, cy0, w, h), p, guesses, o)
	if err != nil {
		return nil, err
	}
	for a := range r.Points {
		r.Points[a].X += float64(cx0)
		r.Points[a].Y += float64(cy0)
	}
	return r.Points, nil
}

// matchAll correlates ref → def at the points idx of pts (laid on grid g):
// first the seed points (every SeedSpacing px in both directions) from
// seed (nil: the integer search of correlate), then every other point from
// the shape function of the nearest accepted seed, then up to five rounds
// in which failed points start from an accepted 4-neighbour. Points not in
// idx are returned with status Outside.
func matchAll(ctx context.Context, ref, def *imageio.Gray, pts [][2]float64, idx []int, g correlate.Grid,
	seed func(k int) ([12]float64, bool), co correlate.Options, spacing int) ([]correlate.Point, error) {
	out := make([]correlate.Point, len(pts))
	for k := range out {
		out[k].X, out[k].Y, out[k].Status = pts[k][0], pts[k][1], correlate.Outside
	}
	if len(idx) == 0 {
		return out, nil
	}
	every := max(1, int(math.Round(float64(spacing)/float64(g.Step))))
	in := make([]bool, len(pts))
	for _, k := range idx {
		in[k] = true
	}
	// Seeds.
	var sk []int
	var sg [][12]float64
	for _, k := range idx {
		i, j := k%g.Nx, k/g.Nx
		if i%every != every/2 || j%every != every/2 {
			continue
		}
		if seed == nil {
			sk = append(sk, k)
			continue
		}
		if p, ok := seed(k); ok {
			sk = append(sk, k)
			sg = append(sg, p)
		}
	}
	if err := ctx.Err(); err != nil {
		return nil, fmt.Errorf("stereo: %w", err)
	}
	run := func(ks []int, guesses [][12]float64) error {
		if len(ks) == 0 {
			return nil
		}
		r, err := runCropped(ctx, ref, def, pts, ks, guesses, co)
		if err != nil {
			return fmt.Errorf("stereo: %w", err)
		}
		for a, k := range ks {
			out[k] = r[a]
		}
		return nil
	}
	if seed == nil {
		// Tracking: the integer search of correlate (Search px around each
		// point) is the costly part, so only every third seed in each
		// direction searches; the other seeds start from the nearest of
		// those and search only if that start fails.
		var wide, near []int
		for _, k := range sk {
			i, j := k%g.Nx/every, k/g.Nx/every
			if i%3 == 1 || j%3 == 1 || len(sk) < 9 {
				near = append(near, k)
			} else {
				wide = append(wide, k)
			}
		}
		if len(wide) == 0 {
			wide, near = sk, nil
		}
		if err := run(wide, nil); err != nil {
			return nil, err
		}
		var guided, blind []int
		var ng [][12]float64
		for _, k := range near {
			best, bd := -1, math.Inf(1)
			for _, s := range wide {
				if out[s].Status != correlate.OK {
					continue
				}
				if d := sq(pts[s][0]-pts[k][0]) + sq(pts[s][1]-pts[k][1]); d < bd {
					best, bd = s, d
				}
			}
			if best < 0 {
				blind = append(blind, k)
				continue
			}
			guided = append(guided, k)
			ng = append(ng, correlate.Recentre(out[best].P, pts[k][0]-pts[best][0], pts[k][1]-pts[best][1]))
		}
		if err := run(guided, ng); err != nil {
			return nil, err
		}
		if err := run(blind, nil); err != nil {
			return nil, err
		}
	} else if err := run(sk, sg); err != nil {
		return nil, err
	}
	var okSeeds []int
	isSeed := make([]bool, len(pts))
	for _, k := range sk {
		isSeed[k] = true
		if out[k].Status == correlate.OK {
			okSeeds = append(okSeeds, k)
		}
	}
	if len(okSeeds) == 0 {
		for _, k := range idx {
			if !isSeed[k] {
				out[k].Status = correlate.Unreached
			}
		}
		return out, nil
	}
	// Every other point from the nearest accepted seed.
	var rest []int
	var rg [][12]float64
	for _, k := range idx {
		if isSeed[k] {
			continue
		}
		best, bd := -1, math.Inf(1)
		for _, s := range okSeeds {
			d := sq(pts[s][0]-pts[k][0]) + sq(pts[s][1]-pts[k][1])
			if d < bd {
				best, bd = s, d
			}
		}
		rest = append(rest, k)
		rg = append(rg, correlate.Recentre(out[best].P, pts[k][0]-pts[best][0], pts[k][1]-pts[best][1]))
	}
	if err := run(rest, rg); err != nil {
		return nil, err
	}
	// Repair rounds from accepted neighbours.
	for range 5 {
		var ks []int
		var gs [][12]float64
		for _, k := range idx {
			st := out[k].Status
			if st == correlate.OK || st == correlate.Outside || st == correlate.LowContrast {
				continue
			}
			i, j := k%g.Nx, k/g.Nx
			for _, d := range [4][2]int{{1, 0}, {-1, 0}, {0, 1}, {0, -1}} {
				a, b := i+d[0], j+d[1]
				if a < 0 || b < 0 || a >= g.Nx || b >= g.Ny {
					continue
				}
				nb := b*g.Nx + a
				if in[nb] && out[nb].Status == correlate.OK {
					ks = append(ks, k)
					gs = append(gs, correlate.Recentre(out[nb].P, pts[k][0]-pts[nb][0], pts[k][1]-pts[nb][1]))
					break
				}
			}
		}
		if len(ks) == 0 {
			break
		}
		before := make([]correlate.Point, len(ks))
		for a, k := range ks {
			before[a] = out[k]
		}
		if err := run(ks, gs); err != nil {
			return nil, err
		}
		gained := 0
		for a, k := range ks {
			if out[k].Status == correlate.OK {
				gained++
			} else {
				out[k] = before[a]
			}
		}
		if gained == 0 {
			break
		}
	}
	return out, nil
}

// epiSearch finds a left subset along its epipolar line in the right
// image by ZNCC.
type epiSearch struct {
	tri          *Triangulator
	l, r         *imageio.Gray
	m            int
	zmin, zmax   float64
	tmpl, tx, ty []float64
}

func newEpiSearch(tri *Triangulator, l, r *imageio.Gray, m int, zmin, zmax float64) *epiSearch {
	return &epiSearch{tri: tri, l: l, r: r, m: m, zmin: zmin, zmax: zmax}
}

// template fills the normalised template of the left subset at (x, y),
// every stride-th pixel; false for a blank subset.
func (e *epiSearch) template(x, y, stride int) bool {
	e.tmpl, e.tx, e.ty = e.tmpl[:0], e.tx[:0], e.ty[:0]
	var s float64
	for j := -e.m; j <= e.m; j += stride {
		for i := -e.m; i <= e.m; i += stride {
			v := float64(e.l.At(x+i, y+j))
			e.tmpl = append(e.tmpl, v)
			e.tx = append(e.tx, float64(i))
			e.ty = append(e.ty, float64(j))
			s += v
		}
	}
	mean := s / float64(len(e.tmpl))
	var n float64
	for k := range e.tmpl {
		e.tmpl[k] -= mean
		n += e.tmpl[k] * e.tmpl[k]
	}
	if !(n > 1e-9) {
		return false
	}
	n = math.Sqrt(n)
	for k := range e.tmpl {
		e.tmpl[k] /= n
	}
	return true
}

// zncc returns the ZNCC of the template with the right image around
// (x, y) by bilinear interpolation; ok is false outside the image.
func (e *epiSearch) zncc(x, y float64) (float64, bool) {
	m := float64(e.m)
	if x-m < 0 || y-m < 0 || x+m >= float64(e.r.W-1) || y+m >= float64(e.r.H-1) {
		return 0, false
	}
	var s, ss, st float64
	for k, t := range e.tmpl {
		px, py := x+e.tx[k], y+e.ty[k]
		x0, y0 := int(px), int(py)
		fx, fy := px-float64(x0), py-float64(y0)
		o := y0*e.r.Stride + x0
		a, b := float64(e.r.Pix[o]), float64(e.r.Pix[o+1])
		c, d := float64(e.r.Pix[o+e.r.Stride]), float64(e.r.Pix[o+e.r.Stride+1])
		v := (a*(1-fx)+b*fx)*(1-fy) + (c*(1-fx)+d*fx)*fy
		s += v
		ss += v * v
		st += v * t
	}
	n := float64(len(e.tmpl))
	vr := ss - s*s/n
	if !(vr > 1e-9) {
		return 0, true
	}
	return st / math.Sqrt(vr), true // Σ t = 0, so Σ (v − v̄) t = Σ v t
}

// search returns the right position of the left subset at (x, y): the best
// ZNCC along the epipolar curve (sampled every ~0.7 px in the right image,
// uniformly in inverse depth), with a half-resolution template, refined at
// full resolution around the best sample. ok is false if nothing in the
// right image correlates above 0.5.
func (e *epiSearch) search(x, y float64) (float64, float64, bool) {
	xn, yn, err := e.tri.rig.Left.Normalize(x, y)
	if err != nil {
		return 0, 0, false
	}
	at := func(z float64) (float64, float64, bool) {
		_, r, ok := e.tri.Project([3]float64{xn * z, yn * z, z})
		return r[0], r[1], ok
	}
	ax, ay, ok1 := at(e.zmin)
	bx, by, ok2 := at(e.zmax)
	if !ok1 || !ok2 {
		return 0, 0, false
	}
	L := math.Hypot(bx-ax, by-ay)
	ns := int(math.Min(math.Ceil(1.5*L), 20000)) + 1
	if !e.template(int(x), int(y), 2) {
		return 0, 0, false
	}
	type cand struct{ w, c float64 }
	best := cand{c: -2}
	iz0, iz1 := 1/e.zmin, 1/e.zmax
	for k := range ns {
		w := iz0 + (iz1-iz0)*float64(k)/float64(max(1, ns-1))
		px, py, ok := at(1 / w)
		if !ok {
			continue
		}
		if c, ok := e.zncc(px, py); ok && c > best.c {
			best = cand{w, c}
		}
	}
	if best.c < 0.5 {
		return 0, 0, false
	}
	e.template(int(x), int(y), 1)
	dw := (iz1 - iz0) / float64(max(1, ns-1))
	fine := cand{c: -2}
	for k := -8; k <= 8; k++ {
		w := best.w + dw*float64(k)/4
		px, py, ok := at(1 / w)
		if !ok {
			continue
		}
		if c, ok := e.zncc(px, py); ok && c > fine.c {
			fine = cand{w, c}
		}
	}
	if fine.c < 0.5 {
		return 0, 0, false
	}
	px, py, _ := at(1 / fine.w)
	return px, py, true
}

// StatePoint is a material point in a deformed state.
type StatePoint struct {
	// XL, YL and XR, YR are its positions in the left and right deformed
	// images, px.
	XL, YL, XR, YR float64
	// Pos is its 3D position and Disp = Pos − reference Pos its
	// displacement (U, V, W), mm, left camera frame; Std the std of Disp
	// per axis (the reference and deformed positions taken as
	// independent).
	Pos, Disp, Std [3]float64
	// ZNCC is the lower of the two tracking matches; Gap the optimal
	// correction of the deformed pair, px.
	ZNCC, Gap float64
	Status    Status
	// Match is the 2D status of the match that failed.
	Match correlate.Status
}

// State is one deformed state of a stereo series.
type State struct {
	Points []StatePoint
}

// OK returns the number of points with status OK.
func (s *State) OK() int {
	n := 0
	for _, p := range s.Points {
		if p.Status == OK {
			n++
		}
	}
	return n
}

// Track follows every reference point into a deformed pair: the left
// subsets from the left reference to the left deformed image, the right
// subsets (at the points' right reference positions) from the right
// reference to the right deformed image, each seeded by correlate's
// integer search every SeedSpacing px and propagated as in Match; then the
// deformed pair is triangulated. leftRef and rightRef must be the images
// Match was given. It returns an error for images of the wrong size.
func (r *Reference) Track(ctx context.Context, leftRef, rightRef, leftDef, rightDef *imageio.Gray) (*State, error) {
	rig := r.tri.Rig()
	if err := checkPair(rig, leftRef, rightRef, "reference pair"); err != nil {
		return nil, err
	}
	if err := checkPair(rig, leftDef, rightDef, "deformed pair"); err != nil {
		return nil, err
	}
	co := r.Options.Correlate
	co.Seeds, co.Start, co.Progress = nil, nil, nil
	n := len(r.Points)
	pl := make([][2]float64, n)
	pr := make([][2]float64, n)
	var idx []int
	for k, p := range r.Points {
		pl[k] = [2]float64{p.X, p.Y}
		pr[k] = [2]float64{p.XR, p.YR}
		if p.Status == OK {
			idx = append(idx, k)
		} else {
			pr[k] = pl[k]
		}
	}
	lt, err := matchAll(ctx, leftRef, leftDef, pl, idx, r.Grid, nil, co, r.Options.SeedSpacing)
	if err != nil {
		return nil, err
	}
	cr := co
	cr.Mask = nil // the mask belongs to the left image
	rt, err := matchAll(ctx, rightRef, rightDef, pr, idx, r.Grid, nil, cr, r.Options.SeedSpacing)
	if err != nil {
		return nil, err
	}
	st := &State{Points: make([]StatePoint, n)}
	for k, p := range r.Points {
		q := &st.Points[k]
		q.Status, q.Match = p.Status, p.Match
		if p.Status != OK {
			continue
		}
		a, b := lt[k], rt[k]
		q.ZNCC = math.Min(a.ZNCC, b.ZNCC)
		if a.Status != correlate.OK {
			q.Status, q.Match = LeftTrack, a.Status
			continue
		}
		if b.Status != correlate.OK {
			q.Status, q.Match = RightTrack, b.Status
			continue
		}
		q.XL, q.YL = p.X+a.P[correlate.U], p.Y+a.P[correlate.V]
		q.XR, q.YR = p.XR+b.P[correlate.U], p.YR+b.P[correlate.V]
		sl := math.Hypot(a.StdU, a.StdV) / math.Sqrt2
		sr := math.Hypot(math.Hypot(b.StdU, b.StdV)/math.Sqrt2, p.StdMatch)
		t, c, s := triangulate(r.tri, q.XL, q.YL, q.XR, q.YR, sl, sr, r.Options.MaxGap)
		q.Pos, q.Gap, q.Status = t.X, t.Gap, s
		if s != OK {
			continue
		}
		for i := range 3 {
			q.Disp[i] = q.Pos[i] - p.Pos[i]
			q.Std[i] = math.Sqrt(c[i][i] + p.Std[i]*p.Std[i])
		}
	}
	return st, nil
}

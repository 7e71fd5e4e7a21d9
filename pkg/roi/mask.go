package roi

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"sort"

	"github.com/mottledic/mottle/pkg/imageio"
)

// Mask is a per-pixel region of interest over a W×H image, with a
// summed-area table so that "is this whole rectangle inside" is O(1).
type Mask struct {
	// W and H are the image size in pixels.
	W, H int
	in   []bool  // row-major, stride W
	sum  []int32 // (W+1)×(H+1) summed-area table of in
	n    int
	box  [4]int // Bounds: x0, y0, x1, y1 (all zero when n = 0)
}

// Validate reports every problem with the Spec for a w×h image.
func (s Spec) Validate(w, h int) error {
	var errs []error
	if s.Rect != nil {
		r := *s.Rect
		if r[0] >= r[2] || r[1] >= r[3] {
			errs = append(errs, fmt.Errorf("roi: rect %v: want x0 < x1 and y0 < y1", r))
		} else if r[0] < 0 || r[1] < 0 || r[2] > w || r[3] > h {
			errs = append(errs, fmt.Errorf("roi: rect %v: must lie within the %d×%d image (0 ≤ x0 < x1 ≤ %d, 0 ≤ y0 < y1 ≤ %d)", r, w, h, w, h))
		}
	}
	checkPoly := func(name string, p [][2]float64) {
		if len(p) < 3 {
			errs = append(errs, fmt.Errorf("roi: %s has %d vertices: want at least 3", name, len(p)))
			return
		}
		for i, v := range p {
			if math.IsNaN(v[0]) || math.IsNaN(v[1]) || math.IsInf(v[0], 0) || math.IsInf(v[1], 0) {
				errs = append(errs, fmt.Errorf("roi: %s vertex %d is %v: want finite coordinates", name, i, v))
			}
		}
	}
	if s.Polygon != nil {
		checkPoly("polygon", s.Polygon)
	}
	for i, hole := range s.Holes {
		checkPoly(fmt.Sprintf("hole %d", i), hole)
	}
	return errors.Join(errs...)
}

// Mask rasterises the Spec for a w×h image. A pixel is inside when its
// centre is inside the rectangle and the polygon (even–odd rule) and not
// inside any hole. It fails on an invalid Spec or an empty region.
func (s Spec) Mask(w, h int) (*Mask, error) {
	if w <= 0 || h <= 0 {
		return nil, fmt.Errorf("roi: image size %d×%d: want positive", w, h)
	}
	if err := s.Validate(w, h); err != nil {
		return nil, err
	}
	in := make([]bool, w*h)
	x0, y0, x1, y1 := 0, 0, w, h
	if s.Rect != nil {
		x0, y0, x1, y1 = s.Rect[0], s.Rect[1], s.Rect[2], s.Rect[3]
	}
	for y := y0; y < y1; y++ {
		row := in[y*w+x0 : y*w+x1]
		for x := range row {
			row[x] = true
		}
	}
	if s.Polygon != nil {
		poly := make([]bool, w*h)
		fillPolygon(poly, w, h, s.Polygon, true)
		for i := range in {
			in[i] = in[i] && poly[i]
		}
	}
	for _, hole := range s.Holes {
		fillPolygon(in, w, h, hole, false)
	}
	m := newMask(w, h, in)
	if m.n == 0 {
		return nil, errors.New("roi: the region of interest contains no pixel centre")
	}
	return m, nil
}

// fillPolygon sets dst to val at every pixel whose centre lies inside poly
// (even–odd rule; a centre exactly on a left edge counts as inside).
func fillPolygon(dst []bool, w, h int, poly [][2]float64, val bool) {
	var xs []float64
	n := len(poly)
	for y := 0; y < h; y++ {
		fy := float64(y)
		xs = xs[:0]
		for i := 0; i < n; i++ {
			a, b := poly[i], poly[(i+1)%n]
			if (a[1] <= fy && b[1] > fy) || (b[1] <= fy && a[1] > fy) {
				xs = append(xs, a[0]+(fy-a[1])*(b[0]-a[0])/(b[1]-a[1]))
			}
		}
		sort.Float64s(xs)
		for k := 0; k+1 < len(xs); k += 2 {
			lo := int(math.Ceil(xs[k]))
			hi := int(math.Ceil(xs[k+1])) // exclusive
			lo = max(lo, 0)
			hi = min(hi, w)
			for x := lo; x < hi; x++ {
				dst[y*w+x] = val
			}
		}
	}
}

// FromImage makes a mask from a mask image: pixels with a grey level above
// half the image's maximum are inside. The image must have size w×h.
func FromImage(g *imageio.Gray, w, h int) (*Mask, error) {
	if g == nil {
		return nil, errors.New("roi: nil mask image")
	}
	if g.W != w || g.H != h {
		return nil, fmt.Errorf("roi: mask image is %d×%d but the reference image is %d×%d: they must match", g.W, g.H, w, h)
	}
	if g.Stride < g.W || len(g.Pix) < (g.H-1)*g.Stride+g.W {
		return nil, fmt.Errorf("roi: mask image %d×%d with stride %d has %d samples: inconsistent", g.W, g.H, g.Stride, len(g.Pix))
	}
	var top float32
	for y := 0; y < h; y++ {
		for _, v := range g.Pix[y*g.Stride : y*g.Stride+w] {
			top = max(top, v)
		}
	}
	if !(top > 0) {
		return nil, errors.New("roi: mask image is all black: no pixel is inside")
	}
	in := make([]bool, w*h)
	for y := 0; y < h; y++ {
		for x, v := range g.Pix[y*g.Stride : y*g.Stride+w] {
			in[y*w+x] = v > top/2
		}
	}
	return newMask(w, h, in), nil
}

// Full returns a mask covering the whole w×h image.
func Full(w, h int) *Mask {
	in := make([]bool, w*h)
	for i := range in {
		in[i] = true
	}
	// newMask's running sums in closed form: (x+1)·(y+1) pixels lie in the
	// rectangle up to (x, y).
	m := &Mask{W: w, H: h, in: in, sum: make([]int32, (w+1)*(h+1)), n: w * h}
	if w > 0 && h > 0 {
		m.box = [4]int{0, 0, w, h}
	}
	for y := 1; y <= h; y++ {
		row := m.sum[y*(w+1)+1 : (y+1)*(w+1)]
		for x := range row {
			row[x] = int32((x + 1) * y)
		}
	}
	return m
}

// newMask builds the summed-area table, the count and the bounds of in,
// row by row.
func newMask(w, h int, in []bool) *Mask {
	m := &Mask{W: w, H: h, in: in, sum: make([]int32, (w+1)*(h+1))}
	x0, y0, x1, y1 := w, h, 0, 0
	for y := 0; y < h; y++ {
		row := in[y*w : y*w+w]
		above := m.sum[y*(w+1)+1 : y*(w+1)+1+w]
		cur := m.sum[(y+1)*(w+1)+1 : (y+1)*(w+1)+1+w]
		above, cur = above[:len(row)], cur[:len(row)]
		var n int32
		for x, v := range row {
			if v {
				n++
			}
			cur[x] = above[x] + n
		}
		if n > 0 {
			m.n += int(n)
			first, last := slices.Index(row, true), len(row)-1
			for !row[last] {
				last--
			}
			x0, x1 = min(x0, first), max(x1, last+1)
			y0, y1 = min(y0, y), y+1
		}
	}
	if m.n > 0 {
		m.box = [4]int{x0, y0, x1, y1}
	}
	return m
}

// Intersect returns the pixels inside both m and o, which must have the same size.
func (m *Mask) Intersect(o *Mask) (*Mask, error) {
	if m.W != o.W || m.H != o.H {
		return nil, fmt.Errorf("roi: cannot intersect a %d×%d mask with a %d×%d mask", m.W, m.H, o.W, o.H)
	}
	in := make([]bool, len(m.in))
	for i := range in {
		in[i] = m.in[i] && o.in[i]
	}
	r := newMask(m.W, m.H, in)
	if r.n == 0 {
		return nil, errors.New("roi: the intersection of the masks is empty")
	}
	return r, nil
}

// Count returns the number of pixels inside.
func (m *Mask) Count() int { return m.n }

// Row returns the inside flags of row y, 0 ≤ y < H (W values; it panics
// for another y). The caller must not modify them.
func (m *Mask) Row(y int) []bool {
	if y < 0 || y >= m.H {
		panic(fmt.Sprintf("roi: Mask.Row(%d) of a mask of %d rows", y, m.H))
	}
	return m.in[y*m.W : y*m.W+m.W : y*m.W+m.W]
}

// Inside reports whether pixel (x, y) is inside; pixels off the image are not.
func (m *Mask) Inside(x, y int) bool {
	if x < 0 || y < 0 || x >= m.W || y >= m.H {
		return false
	}
	return m.in[y*m.W+x]
}

// RectInside reports whether every pixel x0 ≤ x ≤ x1, y0 ≤ y ≤ y1
// (inclusive) is inside. Rectangles reaching off the image are not inside.
func (m *Mask) RectInside(x0, y0, x1, y1 int) bool {
	if x0 < 0 || y0 < 0 || x1 >= m.W || y1 >= m.H || x0 > x1 || y0 > y1 {
		return false
	}
	w := m.W + 1
	s := m.sum[(y1+1)*w+x1+1] - m.sum[y0*w+x1+1] - m.sum[(y1+1)*w+x0] + m.sum[y0*w+x0]
	return int(s) == (x1-x0+1)*(y1-y0+1)
}

// Bounds returns the smallest rectangle x0 ≤ x < x1, y0 ≤ y < y1 holding
// every inside pixel (all zero for an empty mask).
func (m *Mask) Bounds() (x0, y0, x1, y1 int) {
	return m.box[0], m.box[1], m.box[2], m.box[3]
}

// Centroid returns the mean position of the inside pixels.
func (m *Mask) Centroid() (cx, cy float64) {
	var sx, sy float64
	for y := 0; y < m.H; y++ {
		for x := 0; x < m.W; x++ {
			if m.in[y*m.W+x] {
				sx += float64(x)
				sy += float64(y)
			}
		}
	}
	if m.n == 0 {
		return 0, 0
	}
	return sx / float64(m.n), sy / float64(m.n)
}

package spline

import (
	"context"
	"errors"
)

// Table holds, for every pixel cell [x, x+1)×[y, y+1) of a cubic spline
// image, the 16 coefficients of the bicubic polynomial that the spline is on
// that cell: the precomputed interpolation coefficients of Pan, Li & Tong
// 2013, "Fast, robust and accurate digital image correlation calculation
// without redundant computations", Exp. Mech. 53:1277 (there for bicubic
// convolution; here for the cubic B-spline, whose pieces are bicubic
// polynomials as well). One evaluation then costs 16 multiply-adds and no
// weights, and reads one 64-byte block.
//
// The coefficients are stored as float32: 64 bytes per image pixel. The
// rounding error of an evaluation is about 1e-7 of the grey level, far
// below the noise of any camera (the tests bound it).
//
// A Table is safe for concurrent use once built.
type Table struct {
	// W and H are the size of the source image in pixels.
	W, H int
	a    []float32 // 16 coefficients per cell, row-major cells, a[16(yW+x) + 4j + i] multiplies tx^i·ty^j
}

// BytesPerPixel is the memory a Table takes per image pixel.
const BytesPerPixel = 16 * 4

// ErrNotCubic is returned by NewTable for a spline that is not cubic.
var ErrNotCubic = errors.New("spline: coefficient table: only the cubic spline is tabulated")

// cubicBasis[q][k] is the coefficient of t^k in the weight β³(t + 1 − q)
// of coefficient ⌊x⌋−1+q (the polynomials of cubicWeights).
var cubicBasis = [4][4]float64{
	{1.0 / 6, -3.0 / 6, 3.0 / 6, -1.0 / 6},
	{4.0 / 6, 0, -6.0 / 6, 3.0 / 6},
	{1.0 / 6, 3.0 / 6, 3.0 / 6, -3.0 / 6},
	{0, 0, 0, 1.0 / 6},
}

// NewTable tabulates the cubic spline s with up to threads goroutines
// (≤ 0: GOMAXPROCS). The result does not depend on threads.
func NewTable(ctx context.Context, s *Image, threads int) (*Table, error) {
	if s.order != Cubic {
		return nil, ErrNotCubic
	}
	t := AllocTable(s.W, s.H)
	if err := parallelRows(ctx, s.H, RowChunk, threads, func(y0, y1 int) { t.FillRows(s, y0, y1) }); err != nil {
		return nil, err
	}
	return t, nil
}

// AllocTable allocates the table of a w×h cubic spline, for FillRows to
// fill: NewTable in steps that a caller can share out among goroutines
// together with other work (the allocation itself, which zeroes 64 bytes
// per pixel, among them).
func AllocTable(w, h int) *Table {
	return &Table{W: w, H: h, a: make([]float32, 16*w*h)}
}

// FillRows computes the cells of rows y0 ≤ y < y1 from the cubic spline s
// of the table's size (it panics for another spline). Each row gets the
// same coefficients whichever call computes it.
func (t *Table) FillRows(s *Image, y0, y1 int) {
	if s.W != t.W || s.H != t.H || s.order != Cubic {
		panic("spline: Table.FillRows: not the spline the table was allocated for")
	}
	w := s.W
	cs := s.cs
	// rows[r][4x+k] = Σ_q B[q][k]·c[y−1+r][x−1+q]: the x polynomial of
	// coefficient row y−1+r over cell x.
	var rows [4][]float64
	buf := make([]float64, 16*w)
	for r := range rows {
		rows[r] = buf[4*r*w : 4*(r+1)*w : 4*(r+1)*w]
	}
	xpoly := func(y int, dst []float64) {
		src := s.c[(y+pad)*cs+pad-1 : (y+pad)*cs+pad+w+2]
		src, dst = src[:w+3], dst[:4*w]
		for x := 0; x < w; x++ {
			c0, c1, c2, c3 := src[x], src[x+1], src[x+2], src[x+3]
			d := dst[4*x : 4*x+4 : 4*x+4]
			d[0] = (c0 + 4*c1 + c2) / 6
			d[1] = (c2 - c0) / 2
			d[2] = (c0 - 2*c1 + c2) / 2
			d[3] = (c3 - c0 + 3*(c1-c2)) / 6
		}
	}
	for r := 0; r < 3; r++ {
		xpoly(y0-1+r, rows[r])
	}
	for y := y0; y < y1; y++ {
		xpoly(y+2, rows[3])
		// Slices of exact length, so that the compiler proves most
		// indices in bounds (the arithmetic is the same, in the same
		// order).
		n := 4 * w
		r0, r1, r2, r3 := rows[0][:n], rows[1][:n], rows[2][:n], rows[3][:n]
		out := t.a[16*y*w : 16*(y+1)*w]
		for x := 0; x < w; x++ {
			o := out[16*x : 16*x+16 : 16*x+16]
			p0 := r0[4*x : 4*x+4 : 4*x+4]
			p1 := r1[4*x : 4*x+4 : 4*x+4]
			p2 := r2[4*x : 4*x+4 : 4*x+4]
			p3 := r3[4*x : 4*x+4 : 4*x+4]
			for i := 0; i < 4; i++ {
				a0, a1, a2, a3 := p0[i], p1[i], p2[i], p3[i]
				o[i] = float32((a0 + 4*a1 + a2) / 6)
				o[4+i] = float32((a2 - a0) / 2)
				o[8+i] = float32((a0 - 2*a1 + a2) / 2)
				o[12+i] = float32((a3 - a0 + 3*(a1-a2)) / 6)
			}
		}
		rows[0], rows[1], rows[2], rows[3] = r1, r2, r3, r0
	}
}

// Cell returns the 16 coefficients of cell (x, y), 0 ≤ x < W, 0 ≤ y < H:
// the spline at (x+tx, y+ty), 0 ≤ tx, ty ≤ 1, is Σ c[4j+i]·tx^i·ty^j.
// It panics outside the image.
func (t *Table) Cell(x, y int) *[16]float32 {
	k := 16 * (y*t.W + x)
	return (*[16]float32)(t.a[k : k+16])
}

// Coefficients returns the table itself, for loops that evaluate many
// cells inline: the 16 coefficients of cell (x, y) start at 16·(y·W + x),
// in the order of Cell. The caller must not modify it.
func (t *Table) Coefficients() []float32 { return t.a }

// Eval evaluates the polynomial of one cell at the fractional offsets
// (tx, ty) by Horner's rule in each direction.
func Eval(c *[16]float32, tx, ty float32) float32 {
	r0 := c[0] + tx*(c[1]+tx*(c[2]+tx*c[3]))
	r1 := c[4] + tx*(c[5]+tx*(c[6]+tx*c[7]))
	r2 := c[8] + tx*(c[9]+tx*(c[10]+tx*c[11]))
	r3 := c[12] + tx*(c[13]+tx*(c[14]+tx*c[15]))
	return r0 + ty*(r1+ty*(r2+ty*r3))
}

// At returns the interpolated grey level at (x, y) for 0 ≤ x ≤ W−1 and
// 0 ≤ y ≤ H−1; coordinates outside (and NaN) are clamped to that range.
func (t *Table) At(x, y float64) float64 {
	if !(x >= 0) {
		x = 0
	}
	if !(y >= 0) {
		y = 0
	}
	x = min(x, float64(t.W-1))
	y = min(y, float64(t.H-1))
	ix, iy := int(x), int(y)
	return float64(Eval(t.Cell(ix, iy), float32(x-float64(ix)), float32(y-float64(iy))))
}

// Line evaluates the spline at the len(out) points (x + k·dx, y + k·dy),
// k = 0, 1, …, like Image.Line. Every point must satisfy 0 ≤ x ≤ W−1 and
// 0 ≤ y ≤ H−1 (Line may panic otherwise); callers check the two end
// points, which bound the segment.
func (t *Table) Line(x, y, dx, dy float64, out []float64) {
	w := t.W
	a := t.a
	for k := range out {
		px, py := x+float64(k)*dx, y+float64(k)*dy
		ix, iy := int(px), int(py)
		tx, ty := float32(px-float64(ix)), float32(py-float64(iy))
		o := 16 * (iy*w + ix)
		out[k] = float64(Eval((*[16]float32)(a[o:o+16]), tx, ty))
	}
}

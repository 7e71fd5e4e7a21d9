package spline

import (
	"context"
	"errors"
)

// QuinticRowTable is RowTable for a quintic spline: for every coefficient
// row y (−2 ≤ y ≤ H+2) and pixel cell x (0 ≤ x < W) the 6 coefficients of
// the quintic polynomial in tx that the row sum Σ_q β⁵(tx + 2 − q)·c[y][x−2+q]
// is on that cell, divided by 120 (so that the combination of rows has the
// integer weights of 120·β⁵). The spline at (x+tx, y+ty) is the quintic
// B-spline combination in ty of the six row polynomials of rows
// y−2 … y+3 (EvalRows5). 24 bytes per pixel; a subset row reads six table
// rows, five of them shared with the next subset row. Evaluated this way a
// sample costs about a third of the direct evaluation (Image.At), which
// computes 12 weights and 36 products.
//
// The coefficients are stored as float32; the rounding error of an
// evaluation is about 1e-6 of the grey level (the tests bound it).
//
// A QuinticRowTable is safe for concurrent use once built.
type QuinticRowTable struct {
	// W and H are the size of the source image in pixels.
	W, H int
	a    []float32 // a[6((y+2)W + x) + i] multiplies tx^i in the polynomial of coefficient row y over cell x, over 120
}

// quinticBasis[q][i] is the coefficient of t^i in 120·β⁵(t + 2 − q), the
// weight of coefficient ⌊x⌋−2+q (the polynomials of quinticWeights).
var quinticBasis = [6][6]float64{
	{1, -5, 10, -10, 5, -1},
	{26, -50, 20, 20, -20, 5},
	{66, 0, -60, 0, 30, -10},
	{26, 50, 20, -20, -20, 10},
	{1, 5, 10, 10, 5, -5},
	{0, 0, 0, 0, 0, 1},
}

// NewQuinticRowTable tabulates the quintic spline s with up to threads
// goroutines (≤ 0: GOMAXPROCS). The result does not depend on threads.
func NewQuinticRowTable(ctx context.Context, s *Image, threads int) (*QuinticRowTable, error) {
	if s.order != Quintic {
		return nil, ErrNotQuintic
	}
	t := AllocQuinticRowTable(s.W, s.H)
	if err := parallelRows(ctx, s.H, RowChunk, threads, func(y0, y1 int) { t.FillRows(s, y0, y1) }); err != nil {
		return nil, err
	}
	return t, nil
}

// ErrNotQuintic is returned by NewQuinticRowTable for a spline that is not
// quintic.
var ErrNotQuintic = errors.New("spline: quintic row table: the spline is not quintic")

// AllocQuinticRowTable allocates the row table of a w×h quintic spline,
// for FillRows to fill.
func AllocQuinticRowTable(w, h int) *QuinticRowTable {
	return &QuinticRowTable{W: w, H: h, a: make([]float32, 6*w*(h+5))}
}

// FillRows computes the row polynomials that cell rows y0 ≤ y < y1 own:
// coefficient rows y0 … y1−1, and also rows −2 and −1 when y0 = 0 and rows
// H … H+2 when y1 = H, so that calls over a partition of 0 … H fill the
// whole table, each row once. s must be the quintic spline of the table's
// size (it panics otherwise). Each row gets the same coefficients whichever
// call computes it.
func (t *QuinticRowTable) FillRows(s *Image, y0, y1 int) {
	if s.W != t.W || s.H != t.H || s.order != Quintic {
		panic("spline: QuinticRowTable.FillRows: not the spline the table was allocated for")
	}
	if y0 == 0 {
		y0 = -2
	}
	if y1 == t.H {
		y1 = t.H + 3
	}
	w := s.W
	cs := s.cs
	const scale = 1.0 / (120 * 120)
	b := &quinticBasis
	for y := y0; y < y1; y++ {
		src := s.c[(y+pad)*cs+pad-2 : (y+pad)*cs+pad+w+3]
		dst := t.a[6*(y+2)*w : 6*(y+3)*w]
		for x := 0; x < w; x++ {
			c := (*[6]float64)(src[x:])
			d := (*[6]float32)(dst[6*x:])
			for i := 0; i < 6; i++ {
				v := b[0][i]*c[0] + b[1][i]*c[1] + b[2][i]*c[2] + b[3][i]*c[3] + b[4][i]*c[4] + b[5][i]*c[5]
				d[i] = float32(v * scale)
			}
		}
	}
}

// Coefficients returns the table itself, for loops that evaluate many
// samples inline: the polynomial of coefficient row y over cell x starts at
// 6·((y+2)·W + x), so a sample in cell (x, y) reads the six at
// 6·(y·W + x) + k·6·W, k = 0 … 5 (EvalRows5). The caller must not modify
// it.
func (t *QuinticRowTable) Coefficients() []float32 { return t.a }

// EvalRows5 evaluates the quintic spline in the cell whose row polynomials
// start at a[o], a[o+stride], …, a[o+5·stride] (stride = 6·W) at the
// fractional offsets (tx, ty): each row polynomial by Horner's rule in tx,
// then their B-spline combination in ty as a quintic in ty by Horner's
// rule (combineRows5), all in float32. It is the reference of the passes
// that evaluate the table inline, which do the same operations in the same
// order.
func EvalRows5(a []float32, o, stride int, tx, ty float32) float32 {
	var v [6]float32
	for q := range v {
		p := (*[6]float32)(a[o+q*stride:])
		v[q] = p[0] + tx*(p[1]+tx*(p[2]+tx*(p[3]+tx*(p[4]+tx*p[5]))))
	}
	return combineRows5(v[0], v[1], v[2], v[3], v[4], v[5], ty)
}

// combineRows5 is Σ_q 120·β⁵(ty + 2 − q)·v_q, written as the quintic in ty
// with the coefficients of quinticBasis, grouped by the symmetry of the
// basis about its middle.
func combineRows5(v0, v1, v2, v3, v4, v5, ty float32) float32 {
	s04, d04 := v0+v4, v4-v0
	s13, d13 := v1+v3, v3-v1
	e0 := s04 + 26*s13 + 66*v2
	e1 := 5*d04 + 50*d13
	e2 := 10*s04 + 20*s13 - 60*v2
	e3 := 10*d04 - 20*d13
	e4 := 5*s04 - 20*s13 + 30*v2
	e5 := (v5 - v0) + 5*(v1-v4) + 10*(v3-v2)
	return e0 + ty*(e1+ty*(e2+ty*(e3+ty*(e4+ty*e5))))
}

// At returns the interpolated grey level at (x, y) for 0 ≤ x ≤ W−1 and
// 0 ≤ y ≤ H−1; coordinates outside (and NaN) are clamped to that range.
func (t *QuinticRowTable) At(x, y float64) float64 {
	if !(x >= 0) {
		x = 0
	}
	if !(y >= 0) {
		y = 0
	}
	x = min(x, float64(t.W-1))
	y = min(y, float64(t.H-1))
	ix, iy := int(x), int(y)
	return float64(EvalRows5(t.a, 6*(iy*t.W+ix), 6*t.W, float32(x-float64(ix)), float32(y-float64(iy))))
}

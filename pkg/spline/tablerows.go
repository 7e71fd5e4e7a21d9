package spline

import "context"

// RowTable holds, for every coefficient row y (−1 ≤ y ≤ H+1) of a cubic
// spline image and every pixel cell x (0 ≤ x < W), the 4 coefficients of
// the cubic polynomial in tx that the spline's row sum
// Σ_q β³(tx + 1 − q)·c[y][x−1+q] is on that cell, divided by 6 (so that
// the combination of rows below has small integer weights). The spline at
// (x+tx, y+ty) is then the cubic B-spline combination in ty of the four
// row polynomials of rows y−1 … y+2 (EvalRows). It is the first half of the
// bicubic table (Table; Pan, Li & Tong 2013, Exp. Mech. 53:1277), stored
// instead of the 16 coefficients of each cell: 16 bytes per pixel in place
// of 64, and a subset row reads four table rows, three of them shared with
// the next subset row, so a subset reads about a quarter of the bytes, for
// some 10 more flops per sample.
//
// The coefficients are stored as float32; the rounding error of an
// evaluation is about 1e-7 of the grey level (the tests bound it).
//
// A RowTable is safe for concurrent use once built.
type RowTable struct {
	// W and H are the size of the source image in pixels.
	W, H int
	a    []float32 // a[4((y+1)W + x) + i] multiplies tx^i in the polynomial of coefficient row y over cell x, over 6
}

// RowTableBytesPerPixel is the memory a RowTable takes per image pixel,
// apart from its three extra rows.
const RowTableBytesPerPixel = 4 * 4

// NewRowTable tabulates the cubic spline s with up to threads goroutines
// (≤ 0: GOMAXPROCS). The result does not depend on threads.
func NewRowTable(ctx context.Context, s *Image, threads int) (*RowTable, error) {
	if s.order != Cubic {
		return nil, ErrNotCubic
	}
	t := AllocRowTable(s.W, s.H)
	if err := parallelRows(ctx, s.H, RowChunk, threads, func(y0, y1 int) { t.FillRows(s, y0, y1) }); err != nil {
		return nil, err
	}
	return t, nil
}

// AllocRowTable allocates the row table of a w×h cubic spline, for FillRows
// to fill.
func AllocRowTable(w, h int) *RowTable {
	return &RowTable{W: w, H: h, a: make([]float32, 4*w*(h+3))}
}

// FillRows computes the row polynomials that cell rows y0 ≤ y < y1 own:
// coefficient rows y0 … y1−1, and also row −1 when y0 = 0 and rows H and
// H+1 when y1 = H, so that calls over a partition of 0 … H fill the whole
// table, each row once. s must be the cubic spline of the table's size (it
// panics otherwise). Each row gets the same coefficients whichever call
// computes it.
func (t *RowTable) FillRows(s *Image, y0, y1 int) {
	if s.W != t.W || s.H != t.H || s.order != Cubic {
		panic("spline: RowTable.FillRows: not the spline the table was allocated for")
	}
	if y0 == 0 {
		y0 = -1
	}
	if y1 == t.H {
		y1 = t.H + 2
	}
	w := s.W
	cs := s.cs
	for y := y0; y < y1; y++ {
		src := s.c[(y+pad)*cs+pad-1 : (y+pad)*cs+pad+w+2]
		dst := t.a[4*(y+1)*w : 4*(y+2)*w]
		for x := 0; x < w; x++ {
			c := (*[4]float64)(src[x:])
			d := (*[4]float32)(dst[4*x:])
			c0, c1, c2, c3 := c[0], c[1], c[2], c[3]
			// One sixth of the basis of cubicBasis, by multiplications
			// (float64, then rounded to float32 once).
			d[0] = float32((c0 + 4*c1 + c2) * (1.0 / 36))
			d[1] = float32((c2 - c0) * (1.0 / 12))
			d[2] = float32((c0 - 2*c1 + c2) * (1.0 / 12))
			d[3] = float32((c3 - c0 + 3*(c1-c2)) * (1.0 / 36))
		}
	}
}

// Coefficients returns the table itself, for loops that evaluate many
// samples inline: the polynomial of coefficient row y over cell x starts at
// 4·((y+1)·W + x), so a sample in cell (x, y) reads the four at
// 4·(y·W + x) + k·4·W, k = 0 … 3 (EvalRows). The caller must not modify
// it.
func (t *RowTable) Coefficients() []float32 { return t.a }

// EvalRows evaluates the spline in the cell whose row polynomials start at
// a[o], a[o+stride], a[o+2·stride], a[o+3·stride] (stride = 4·W) at the
// fractional offsets (tx, ty): each row polynomial by Horner's rule in tx,
// then their B-spline combination in ty as a cubic in ty by Horner's rule
// (combineRows), all in float32. It is the reference of the passes that
// evaluate a row table inline, which do the same operations in the same
// order.
func EvalRows(a []float32, o, stride int, tx, ty float32) float32 {
	p0 := (*[4]float32)(a[o:])
	p1 := (*[4]float32)(a[o+stride:])
	p2 := (*[4]float32)(a[o+2*stride:])
	p3 := (*[4]float32)(a[o+3*stride:])
	v0 := p0[0] + tx*(p0[1]+tx*(p0[2]+tx*p0[3]))
	v1 := p1[0] + tx*(p1[1]+tx*(p1[2]+tx*p1[3]))
	v2 := p2[0] + tx*(p2[1]+tx*(p2[2]+tx*p2[3]))
	v3 := p3[0] + tx*(p3[1]+tx*(p3[2]+tx*p3[3]))
	return combineRows(v0, v1, v2, v3, ty)
}

// combineRows is Σ_q β³(ty + 1 − q)·6v_q, for v_q a sixth of the row
// polynomials, written as the cubic in ty with the coefficients of
// cubicBasis times 6 (small integers: additions and a multiplication by 3).
func combineRows(v0, v1, v2, v3, ty float32) float32 {
	s := v0 + v2
	b := v1 + v1
	e0 := s + (b + b)
	e1 := 3 * (v2 - v0)
	e2 := 3 * (s - b)
	e3 := (v3 - v0) + 3*(v1-v2)
	return e0 + ty*(e1+ty*(e2+ty*e3))
}

// At returns the interpolated grey level at (x, y) for 0 ≤ x ≤ W−1 and
// 0 ≤ y ≤ H−1; coordinates outside (and NaN) are clamped to that range.
func (t *RowTable) At(x, y float64) float64 {
	if !(x >= 0) {
		x = 0
	}
	if !(y >= 0) {
		y = 0
	}
	x = min(x, float64(t.W-1))
	y = min(y, float64(t.H-1))
	ix, iy := int(x), int(y)
	return float64(EvalRows(t.a, 4*(iy*t.W+ix), 4*t.W, float32(x-float64(ix)), float32(y-float64(iy))))
}

// Line evaluates the spline at the len(out) points (x + k·dx, y + k·dy),
// k = 0, 1, …, like Image.Line. Every point must satisfy 0 ≤ x ≤ W−1 and
// 0 ≤ y ≤ H−1 (Line may panic otherwise); callers check the two end
// points, which bound the segment.
func (t *RowTable) Line(x, y, dx, dy float64, out []float64) {
	w := t.W
	for k := range out {
		px, py := x+float64(k)*dx, y+float64(k)*dy
		ix, iy := int(px), int(py)
		out[k] = float64(EvalRows(t.a, 4*(iy*w+ix), 4*w, float32(px-float64(ix)), float32(py-float64(iy))))
	}
}

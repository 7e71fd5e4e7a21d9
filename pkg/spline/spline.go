// Package spline interpolates grey-level images with prefiltered cubic or
// quintic B-splines (Unser 1999, "Splines: a perfect fit for signal and
// image processing", IEEE Signal Process. Mag. 16(6):22).
//
// New computes the B-spline coefficients of an image once; At and Grad then
// evaluate the continuous interpolant and its gradient at any point. The
// interpolant passes exactly through the samples. The image is extended
// beyond its edges by whole-sample mirror symmetry (… c b | a b c … | … x y | x …),
// which is SciPy's ndimage mode "mirror". Evaluation does not allocate.
package spline

import (
	"context"
	"fmt"

	"github.com/mottledic/mottle/pkg/imageio"
)

// Order is the degree of the B-spline.
type Order int

const (
	// Cubic is the degree-3 B-spline (4×4 support), the default.
	Cubic Order = 3
	// Quintic is the degree-5 B-spline (6×6 support): lower interpolation
	// bias, about twice the cost of Cubic.
	Quintic Order = 5
)

// String returns "cubic" or "quintic".
func (o Order) String() string {
	switch o {
	case Cubic:
		return "cubic"
	case Quintic:
		return "quintic"
	}
	return fmt.Sprintf("Order(%d)", int(o))
}

// ParseOrder converts "cubic" or "quintic" (as used in parameter files)
// to an Order.
func ParseOrder(s string) (Order, error) {
	switch s {
	case "cubic", "":
		return Cubic, nil
	case "quintic":
		return Quintic, nil
	}
	return 0, fmt.Errorf("spline: interpolation %q: want \"cubic\" or \"quintic\"", s)
}

// pad is the number of mirrored coefficient rows/columns stored around the
// image, enough for the quintic support at the clamped coordinate range.
const pad = 4

// Image holds the B-spline coefficients of a grey-level image.
// It is safe for concurrent use by several goroutines once built.
type Image struct {
	// W and H are the size of the source image in pixels.
	W, H  int
	order Order
	c     []float64 // coefficients, (W+2pad)×(H+2pad), with mirrored margins
	cs    int       // coefficient stride
}

// Order returns the spline degree.
func (s *Image) Order() Order { return s.order }

// Margin is the number of mirrored coefficient rows and columns an Image
// stores on each side of the image.
const Margin = pad

// Coefficients returns the B-spline coefficients with their mirrored
// margins, row after row, and the stride between rows: the coefficient of
// (x, y), −Margin ≤ x < W+Margin and −Margin ≤ y < H+Margin, is
// c[(y+Margin)·stride + x+Margin]. Evaluating at (x+tx, y+ty), 0 ≤ tx,
// ty < 1, reads those of rows and columns x−1 … x+2 (cubic) or x−2 … x+3
// (quintic). The caller must not modify them.
func (s *Image) Coefficients() (c []float64, stride int) { return s.c, s.cs }

// New computes the B-spline coefficients of g. It fails if g is empty,
// inconsistent, contains non-finite values, or order is not Cubic or Quintic.
func New(g *imageio.Gray, order Order) (*Image, error) {
	return NewContext(context.Background(), g, order, 1)
}

// NewContext is New with cancellation and up to threads goroutines
// (threads ≤ 0 means runtime.GOMAXPROCS(0)). The result does not depend on threads.
func NewContext(ctx context.Context, g *imageio.Gray, order Order, threads int) (*Image, error) {
	b, err := NewBuild(g, order)
	if err != nil {
		return nil, err
	}
	if err := parallelRows(ctx, b.Rows(), RowChunk, threads, b.FilterRows); err != nil {
		return nil, err
	}
	if err := b.Err(); err != nil {
		return nil, err
	}
	if err := parallelRows(ctx, b.Blocks(), BlockChunk, threads, b.FilterColumns); err != nil {
		return nil, err
	}
	return b.Finish(), nil
}

// clamp limits coordinates to the range covered by the stored margins, and
// maps NaN to the lower bound so that evaluation never indexes out of range.
func clamp(x float64, n int) float64 {
	if !(x >= -1) {
		return -1
	}
	if x > float64(n) {
		return float64(n)
	}
	return x
}

// floorInt returns ⌊x⌋ for x ≥ −1 without calling math.Floor.
func floorInt(x float64) int {
	i := int(x)
	if float64(i) > x {
		i--
	}
	return i
}

// At returns the interpolated grey level at (x, y). Inside the image,
// 0 ≤ x ≤ W−1 and 0 ≤ y ≤ H−1, it is the spline interpolant; up to one pixel
// beyond the edges it follows the mirror extension; farther out the
// coordinate is clamped. At never panics and does not allocate.
func (s *Image) At(x, y float64) float64 {
	x = clamp(x, s.W)
	y = clamp(y, s.H)
	if s.order == Cubic {
		return s.atCubic(x, y)
	}
	return s.atQuintic(x, y)
}

// AtInside is At for callers that have already checked −1 ≤ x ≤ W and
// −1 ≤ y ≤ H (it panics outside that range). It is the correlation hot path.
func (s *Image) AtInside(x, y float64) float64 {
	if s.order == Cubic {
		return s.atCubic(x, y)
	}
	return s.atQuintic(x, y)
}

func (s *Image) atCubic(x, y float64) float64 {
	ix, iy := floorInt(x), floorInt(y)
	var wx, wy [4]float64
	cubicWeights(x-float64(ix), &wx)
	cubicWeights(y-float64(iy), &wy)
	cs := s.cs
	base := (iy+pad-1)*cs + ix + pad - 1
	var sum float64
	for r := 0; r < 4; r++ {
		row := s.c[base+r*cs : base+r*cs+4]
		sum += wy[r] * (wx[0]*row[0] + wx[1]*row[1] + wx[2]*row[2] + wx[3]*row[3])
	}
	return sum
}

func (s *Image) atQuintic(x, y float64) float64 {
	ix, iy := floorInt(x), floorInt(y)
	var wx, wy [6]float64
	quinticWeights(x-float64(ix), &wx)
	quinticWeights(y-float64(iy), &wy)
	cs := s.cs
	base := (iy+pad-2)*cs + ix + pad - 2
	var sum float64
	for r := 0; r < 6; r++ {
		row := s.c[base+r*cs : base+r*cs+6]
		sum += wy[r] * (wx[0]*row[0] + wx[1]*row[1] + wx[2]*row[2] + wx[3]*row[3] + wx[4]*row[4] + wx[5]*row[5])
	}
	return sum
}

// Grad returns the interpolated grey level and its partial derivatives
// ∂/∂x and ∂/∂y at (x, y), with the same range rules as At.
func (s *Image) Grad(x, y float64) (v, gx, gy float64) {
	x = clamp(x, s.W)
	y = clamp(y, s.H)
	ix, iy := floorInt(x), floorInt(y)
	tx, ty := x-float64(ix), y-float64(iy)
	cs := s.cs
	if s.order == Cubic {
		var wx, wy, dx, dy [4]float64
		cubicWeights(tx, &wx)
		cubicWeights(ty, &wy)
		cubicDerivWeights(tx, &dx)
		cubicDerivWeights(ty, &dy)
		base := (iy+pad-1)*cs + ix + pad - 1
		for r := 0; r < 4; r++ {
			row := s.c[base+r*cs : base+r*cs+4]
			sv := wx[0]*row[0] + wx[1]*row[1] + wx[2]*row[2] + wx[3]*row[3]
			sd := dx[0]*row[0] + dx[1]*row[1] + dx[2]*row[2] + dx[3]*row[3]
			v += wy[r] * sv
			gx += wy[r] * sd
			gy += dy[r] * sv
		}
		return v, gx, gy
	}
	var wx, wy, dx, dy [6]float64
	quinticWeights(tx, &wx)
	quinticWeights(ty, &wy)
	quinticDerivWeights(tx, &dx)
	quinticDerivWeights(ty, &dy)
	base := (iy+pad-2)*cs + ix + pad - 2
	for r := 0; r < 6; r++ {
		row := s.c[base+r*cs : base+r*cs+6]
		var sv, sd float64
		for k := 0; k < 6; k++ {
			sv += wx[k] * row[k]
			sd += dx[k] * row[k]
		}
		v += wy[r] * sv
		gx += wy[r] * sd
		gy += dy[r] * sv
	}
	return v, gx, gy
}

// cubicWeights sets w[k] = β³(t + 1 − k), the weights of the coefficients at
// ⌊x⌋−1 … ⌊x⌋+2 for the fractional part t ∈ [0, 1).
func cubicWeights(t float64, w *[4]float64) {
	u := 1 - t
	t2 := t * t
	w[0] = u * u * u / 6
	w[1] = (3*t2*t - 6*t2 + 4) / 6
	w[3] = t2 * t / 6
	w[2] = 1 - w[0] - w[1] - w[3]
}

// cubicDerivWeights sets the derivatives d/dt of cubicWeights.
func cubicDerivWeights(t float64, d *[4]float64) {
	u := 1 - t
	d[0] = -u * u / 2
	d[1] = 1.5*t*t - 2*t
	d[3] = t * t / 2
	d[2] = -d[0] - d[1] - d[3]
}

// quinticWeights sets w[k] = β⁵(t + 2 − k), the weights of the coefficients
// at ⌊x⌋−2 … ⌊x⌋+3 (polynomial forms as in Thévenaz, Blu & Unser 2000,
// from memory; tests compare them with the truncated-power definition).
func quinticWeights(t float64, w *[6]float64) {
	w2 := t * t
	w[5] = (1.0 / 120.0) * t * w2 * w2
	w2 -= t
	w4 := w2 * w2
	h := t - 0.5
	tt := w2 * (w2 - 3)
	w[0] = (1.0/24.0)*(1.0/5.0+w2+w4) - w[5]
	t0 := (1.0 / 24.0) * (w2*(w2-5) + 46.0/5.0)
	t1 := (-1.0 / 12.0) * h * (tt + 4)
	w[2] = t0 + t1
	w[3] = t0 - t1
	t0 = (1.0 / 16.0) * (9.0/5.0 - tt)
	t1 = (1.0 / 24.0) * h * (w4 - w2 - 5)
	w[1] = t0 + t1
	w[4] = t0 - t1
}

// quinticDerivWeights sets the derivatives d/dt of quinticWeights, using
// β⁵′(x) = β⁴(x + ½) − β⁴(x − ½) (Unser 1999).
func quinticDerivWeights(t float64, d *[6]float64) {
	for k := 0; k < 6; k++ {
		x := t + 2 - float64(k)
		d[k] = bspline4(x+0.5) - bspline4(x-0.5)
	}
}

// bspline4 is the centred quartic B-spline, by its truncated-power form
// β⁴(x) = (1/24) Σ_{k=0}^{5} (−1)^k C(5,k) (x + 5/2 − k)₊⁴.
func bspline4(x float64) float64 {
	binom := [6]float64{1, 5, 10, 10, 5, 1}
	var sum float64
	sign := 1.0
	for k := 0; k < 6; k++ {
		a := x + 2.5 - float64(k)
		if a > 0 {
			a2 := a * a
			sum += sign * binom[k] * a2 * a2
		}
		sign = -sign
	}
	return sum / 24
}

// Line evaluates the interpolant at the len(out) points (x + k·dx, y + k·dy),
// k = 0, 1, …, writing the values to out. Every point must satisfy
// −1 ≤ x ≤ W and −1 ≤ y ≤ H (Line panics otherwise); callers check the two
// end points, which bound the segment. It is the correlation hot path.
func (s *Image) Line(x, y, dx, dy float64, out []float64) {
	if s.order != Cubic {
		for k := range out {
			out[k] = s.atQuintic(x+float64(k)*dx, y+float64(k)*dy)
		}
		return
	}
	cs := s.cs
	c := s.c
	for k := range out {
		px, py := x+float64(k)*dx, y+float64(k)*dy
		ix, iy := floorInt(px), floorInt(py)
		tx, ty := px-float64(ix), py-float64(iy)
		ux, uy := 1-tx, 1-ty
		tx2, ty2 := tx*tx, ty*ty
		wx0 := ux * ux * ux / 6
		wx1 := (3*tx2*tx - 6*tx2 + 4) / 6
		wx3 := tx2 * tx / 6
		wx2 := 1 - wx0 - wx1 - wx3
		wy0 := uy * uy * uy / 6
		wy1 := (3*ty2*ty - 6*ty2 + 4) / 6
		wy3 := ty2 * ty / 6
		wy2 := 1 - wy0 - wy1 - wy3
		base := (iy+pad-1)*cs + ix + pad - 1
		r0 := c[base : base+4]
		r1 := c[base+cs : base+cs+4]
		r2 := c[base+2*cs : base+2*cs+4]
		r3 := c[base+3*cs : base+3*cs+4]
		out[k] = wy0*(wx0*r0[0]+wx1*r0[1]+wx2*r0[2]+wx3*r0[3]) +
			wy1*(wx0*r1[0]+wx1*r1[1]+wx2*r1[2]+wx3*r1[3]) +
			wy2*(wx0*r2[0]+wx1*r2[1]+wx2*r2[2]+wx3*r2[3]) +
			wy3*(wx0*r3[0]+wx1*r3[1]+wx2*r3[2]+wx3*r3[3])
	}
}

// Points evaluates the interpolant at (xs[k], ys[k]) into out[k]. The
// points must satisfy −1 ≤ x ≤ W and −1 ≤ y ≤ H (Points panics otherwise).
func (s *Image) Points(xs, ys, out []float64) {
	xs, ys = xs[:len(out)], ys[:len(out)]
	if s.order != Cubic {
		for k := range out {
			out[k] = s.atQuintic(xs[k], ys[k])
		}
		return
	}
	for k := range out {
		out[k] = s.atCubic(xs[k], ys[k])
	}
}

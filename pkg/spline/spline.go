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
	"errors"
	"fmt"
	"math"
	"runtime"
	"sync"
	"sync/atomic"

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

// Build is an Image under construction, in steps that a caller can share
// out among goroutines together with other work: FilterRows over every
// row, then Err, then FilterColumns over every column block, then Finish.
// NewContext runs these steps. Each row and each column block goes through
// the same operations whichever call handles it, so the result does not
// depend on how the steps are split.
type Build struct {
	s     *Image
	g     *imageio.Gray
	poles []float64
	bad   []int32 // per row: 1 + x of its first non-finite sample, 0: none
}

// NewBuild checks the size of g and the order and allocates the
// coefficients; the samples are checked by FilterRows and Err.
func NewBuild(g *imageio.Gray, order Order) (*Build, error) {
	if err := checkShape(g); err != nil {
		return nil, err
	}
	if order != Cubic && order != Quintic {
		return nil, fmt.Errorf("spline: order %d: want 3 (cubic) or 5 (quintic)", int(order))
	}
	w, h := g.W, g.H
	cs := w + 2*pad
	s := &Image{W: w, H: h, order: order, cs: cs, c: make([]float64, cs*(h+2*pad))}
	return &Build{s: s, g: g, poles: polesOf(order), bad: make([]int32, h)}, nil
}

// Rows returns the number of image rows, the range of FilterRows.
func (b *Build) Rows() int { return b.s.H }

// Blocks returns the number of column blocks, the range of FilterColumns.
func (b *Build) Blocks() int { return (b.s.W + colBlock - 1) / colBlock }

// FilterRows copies the image rows y0 ≤ y < y1 into the coefficients,
// notes their first non-finite sample for Err, and filters them along x.
func (b *Build) FilterRows(y0, y1 int) {
	s, g := b.s, b.g
	cs, w := s.cs, s.W
	for y := y0; y < y1; y++ {
		row := s.c[(y+pad)*cs+pad : (y+pad)*cs+pad+w]
		src := g.Pix[y*g.Stride : y*g.Stride+w]
		row = row[:len(src)]
		var top uint32 // largest |sample| bit pattern: NaN or ±Inf from 0x7f800000 on
		for x, v := range src {
			row[x] = float64(v)
			top = max(top, math.Float32bits(v)&0x7fffffff)
		}
		if top >= 0x7f800000 {
			for x, v := range src {
				if f := float64(v); math.IsNaN(f) || math.IsInf(f, 0) {
					b.bad[y] = int32(x + 1)
					break
				}
			}
		}
	}
	// Four rows at a time: their recursions run side by side.
	y := y0
	for ; y+4 <= y1; y += 4 {
		filterRows4(s.c[(y+pad)*cs+pad:], cs, w, b.poles)
	}
	for ; y < y1; y++ {
		filter1D(s.c[(y+pad)*cs+pad:(y+pad)*cs+pad+w], 1, w, b.poles)
	}
}

// filterRows4 applies filter1D to the four rows c[k·stride : k·stride+n],
// k = 0 … 3, with the same operations in the same order for each row, so
// the results are bitwise those of filter1D; the four recursions run side
// by side, which hides the latency of each step.
func filterRows4(c []float64, stride, n int, poles []float64) {
	if n == 1 {
		return
	}
	r0 := c[:n]
	r1 := c[stride : stride+n]
	r2 := c[2*stride : 2*stride+n]
	r3 := c[3*stride : 3*stride+n]
	r1, r2, r3 = r1[:len(r0)], r2[:len(r0)], r3[:len(r0)]
	gain := 1.0
	for _, z := range poles {
		gain *= (1 - z) * (1 - 1/z)
	}
	for i := range r0 {
		r0[i] *= gain
		r1[i] *= gain
		r2[i] *= gain
		r3[i] *= gain
	}
	last := n - 1
	for _, z := range poles {
		r0[0] = causalInit(r0, 1, n, z)
		r1[0] = causalInit(r1, 1, n, z)
		r2[0] = causalInit(r2, 1, n, z)
		r3[0] = causalInit(r3, 1, n, z)
		for i := 1; i < len(r0); i++ {
			r0[i] += z * r0[i-1]
			r1[i] += z * r1[i-1]
			r2[i] += z * r2[i-1]
			r3[i] += z * r3[i-1]
		}
		f := z / (z*z - 1)
		r0[last] = f * (z*r0[last-1] + r0[last])
		r1[last] = f * (z*r1[last-1] + r1[last])
		r2[last] = f * (z*r2[last-1] + r2[last])
		r3[last] = f * (z*r3[last-1] + r3[last])
		for i := last - 1; i >= 0; i-- {
			r0[i] = z * (r0[i+1] - r0[i])
			r1[i] = z * (r1[i+1] - r1[i])
			r2[i] = z * (r2[i+1] - r2[i])
			r3[i] = z * (r3[i+1] - r3[i])
		}
	}
}

// Err reports the first non-finite sample, in row-major order, once
// FilterRows has run over every row.
func (b *Build) Err() error {
	for y, x := range b.bad {
		if x != 0 {
			return fmt.Errorf("spline: pixel (%d, %d) is %v: want finite grey levels", x-1, y, b.g.Pix[y*b.g.Stride+int(x)-1])
		}
	}
	return nil
}

// FilterColumns filters the column blocks k0 ≤ k < k1 along y, once
// FilterRows has run over every row. The columns of a block run together
// so that the recursions read contiguous rows of memory; each column goes
// through exactly the operations of filter1D.
func (b *Build) FilterColumns(k0, k1 int) {
	s := b.s
	cs, w := s.cs, s.W
	for k := k0; k < k1; k++ {
		x := k * colBlock
		filterColumns(s.c[pad*cs+pad+x:], cs, min(colBlock, w-x), s.H, b.poles)
	}
}

// Finish fills the mirrored margins, once FilterColumns has run over
// every block, and returns the spline.
func (b *Build) Finish() *Image {
	b.s.mirrorMargins()
	return b.s
}

// RowChunk and BlockChunk are the parts, in rows and in column blocks, in
// which the steps of NewContext, NewTable and SampleGradients are shared
// out: small enough that a goroutine that starts late is not waited for
// long, large enough that the rows a part computes twice (the first of a
// ring) cost little. They never depend on the number of goroutines.
const (
	RowChunk   = 32
	BlockChunk = 2
)

// check rejects a nil, empty or inconsistent image and one with a
// non-finite sample.
func check(g *imageio.Gray) error {
	if err := checkShape(g); err != nil {
		return err
	}
	for y := 0; y < g.H; y++ {
		for x, v := range g.Pix[y*g.Stride : y*g.Stride+g.W] {
			f := float64(v)
			if math.IsNaN(f) || math.IsInf(f, 0) {
				return fmt.Errorf("spline: pixel (%d, %d) is %v: want finite grey levels", x, y, v)
			}
		}
	}
	return nil
}

// checkShape rejects a nil, empty or inconsistent image.
func checkShape(g *imageio.Gray) error {
	if g == nil {
		return errors.New("spline: nil image")
	}
	if g.W <= 0 || g.H <= 0 {
		return fmt.Errorf("spline: image size %d×%d: want at least 1×1", g.W, g.H)
	}
	if g.Stride < g.W || len(g.Pix) < (g.H-1)*g.Stride+g.W {
		return fmt.Errorf("spline: image %d×%d with stride %d has %d samples: inconsistent", g.W, g.H, g.Stride, len(g.Pix))
	}
	return nil
}

// parallelRows calls f on the parts [i, min(i+chunk, n)), i = 0, chunk,
// 2·chunk, …, with up to threads goroutines (≤ 0: GOMAXPROCS); each takes
// the next part from a shared counter, so one that starts late takes
// fewer. Each index is handled by exactly one call and the parts do not
// depend on threads, so neither do results.
func parallelRows(ctx context.Context, n, chunk, threads int, f func(i0, i1 int)) error {
	if threads <= 0 {
		threads = runtime.GOMAXPROCS(0)
	}
	parts := (n + chunk - 1) / chunk
	threads = min(threads, parts)
	var next atomic.Int64
	work := func() {
		for ctx.Err() == nil {
			k := int(next.Add(1)) - 1
			if k >= parts {
				return
			}
			f(k*chunk, min((k+1)*chunk, n))
		}
	}
	var wg sync.WaitGroup
	for t := 1; t < threads; t++ {
		wg.Go(work)
	}
	work()
	wg.Wait()
	return ctx.Err()
}

// mirrorIndex maps any integer index to [0, n) by whole-sample mirror
// symmetry with period 2n−2.
func mirrorIndex(i, n int) int {
	if n == 1 {
		return 0
	}
	p := 2*n - 2
	i %= p
	if i < 0 {
		i += p
	}
	if i >= n {
		i = p - i
	}
	return i
}

// mirrorMargins fills the pad margins: the coefficients of a mirror-symmetric
// signal are themselves mirror-symmetric.
func (s *Image) mirrorMargins() {
	cs, w, h := s.cs, s.W, s.H
	for y := 0; y < h; y++ {
		row := s.c[(y+pad)*cs : (y+pad+1)*cs]
		for k := 1; k <= pad; k++ {
			row[pad-k] = row[pad+mirrorIndex(-k, w)]
			row[pad+w-1+k] = row[pad+mirrorIndex(w-1+k, w)]
		}
	}
	for k := 1; k <= pad; k++ {
		copy(s.c[(pad-k)*cs:(pad-k+1)*cs], s.c[(pad+mirrorIndex(-k, h))*cs:])
		copy(s.c[(pad+h-1+k)*cs:(pad+h+k)*cs], s.c[(pad+mirrorIndex(h-1+k, h))*cs:])
	}
}

// Poles of the direct B-spline filter (Unser 1999; numerical values as given
// by Thévenaz, Blu & Unser 2000, "Interpolation revisited", IEEE Trans. Med.
// Imaging 19(7):739, from memory; the tests verify that interpolation
// reproduces the samples, which fails for any wrong pole).
var (
	polesCubic   = [...]float64{math.Sqrt(3) - 2}
	polesQuintic = [...]float64{
		math.Sqrt(135.0/2-math.Sqrt(17745.0/4)) + math.Sqrt(105.0/4) - 13.0/2,
		math.Sqrt(135.0/2+math.Sqrt(17745.0/4)) - math.Sqrt(105.0/4) - 13.0/2,
	}
)

func polesOf(o Order) []float64 {
	if o == Quintic {
		return polesQuintic[:]
	}
	return polesCubic[:]
}

// Prefilter1D replaces the samples c[0], c[stride], … c[(n−1)·stride] by
// their B-spline coefficients of the given order, for mirror boundaries.
func Prefilter1D(c []float64, stride, n int, order Order) {
	filter1D(c, stride, n, polesOf(order))
}

// filter1D is the recursive prefilter of Unser 1999: for each pole z a
// causal and an anti-causal first-order recursion, after an overall gain
// Π(1−z)(1−1/z). Initial values for mirror boundaries follow Thévenaz, Blu
// & Unser 2000 (exact sums, no truncation).
func filter1D(c []float64, stride, n int, poles []float64) {
	if n == 1 {
		return
	}
	gain := 1.0
	for _, z := range poles {
		gain *= (1 - z) * (1 - 1/z)
	}
	for i := 0; i < n; i++ {
		c[i*stride] *= gain
	}
	last := (n - 1) * stride
	for _, z := range poles {
		c[0] = causalInit(c, stride, n, z)
		for i := stride; i <= last; i += stride {
			c[i] += z * c[i-stride]
		}
		c[last] = (z / (z*z - 1)) * (z*c[last-stride] + c[last])
		for i := last - stride; i >= 0; i -= stride {
			c[i] = z * (c[i+stride] - c[i])
		}
	}
}

// colBlock is the number of adjacent columns filterColumns runs together.
const colBlock = 16

// filterColumns applies filter1D to the nc ≤ colBlock columns c[k],
// c[k+stride], … c[k+(n−1)·stride], k = 0 … nc−1, with the same operations
// in the same order for each column, so the result is bitwise that of
// filter1D; the columns are interleaved so that every step reads one
// contiguous run of memory.
func filterColumns(c []float64, stride, nc, n int, poles []float64) {
	if n == 1 {
		return
	}
	gain := 1.0
	for _, z := range poles {
		gain *= (1 - z) * (1 - 1/z)
	}
	for i := 0; i < n; i++ {
		row := c[i*stride : i*stride+nc]
		for k := range row {
			row[k] *= gain
		}
	}
	last := (n - 1) * stride
	for _, z := range poles {
		for k := 0; k < nc; k++ {
			c[k] = causalInit(c[k:], stride, n, z)
		}
		for i := stride; i <= last; i += stride {
			cur, prev := c[i:i+nc], c[i-stride:i-stride+nc]
			for k := range cur {
				cur[k] += z * prev[k]
			}
		}
		end, prev := c[last:last+nc], c[last-stride:last-stride+nc]
		for k := range end {
			end[k] = (z / (z*z - 1)) * (z*prev[k] + end[k])
		}
		for i := last - stride; i >= 0; i -= stride {
			cur, next := c[i:i+nc], c[i+stride:i+stride+nc]
			for k := range cur {
				cur[k] = z * (next[k] - cur[k])
			}
		}
	}
}

// causalInit returns c⁺(0) = Σ_{k=0}^{2n−3} z^k s(k) (mirror-extended s)
// divided by 1 − z^(2n−2). Terms below 1e-17 relative are dropped, which is
// exact in float64.
func causalInit(c []float64, stride, n int, z float64) float64 {
	horizon := int(math.Ceil(math.Log(1e-17) / math.Log(math.Abs(z))))
	if horizon < n {
		zn, sum := z, c[0]
		for k := 1; k < horizon; k++ {
			sum += zn * c[k*stride]
			zn *= z
		}
		return sum
	}
	zn := z
	iz := 1 / z
	z2n := math.Pow(z, float64(n-1))
	sum := c[0] + z2n*c[(n-1)*stride]
	z2n *= z2n * iz
	for k := 1; k <= n-2; k++ {
		sum += (zn + z2n) * c[k*stride]
		zn *= z
		z2n *= iz
	}
	return sum / (1 - zn*zn)
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

// SampleGradients returns ∂/∂x and ∂/∂y of the interpolant at every pixel
// centre, row-major with stride W, computed with up to threads goroutines
// (≤ 0: GOMAXPROCS). The values do not depend on threads.
func (s *Image) SampleGradients(ctx context.Context, threads int) (gx, gy []float32, err error) {
	gx = make([]float32, s.W*s.H)
	gy = make([]float32, s.W*s.H)
	err = parallelRows(ctx, s.H, RowChunk, threads, func(y0, y1 int) { s.GradientRows(gx, gy, y0, y1) })
	if err != nil {
		return nil, nil, err
	}
	return gx, gy, nil
}

// GradientRows computes the values of SampleGradients for the rows
// y0 ≤ y < y1 into gx and gy (W·H values each, row-major with stride W).
// Each row gets the same values whichever call computes it.
func (s *Image) GradientRows(gx, gy []float32, y0, y1 int) {
	w := s.W
	// At integer positions t = 0, so the weights are constants.
	var wv, wd []float64
	if s.order == Cubic {
		var a [4]float64
		var b [4]float64
		cubicWeights(0, &a)
		cubicDerivWeights(0, &b)
		wv, wd = a[:3], b[:3] // the fourth weight is zero at t = 0
	} else {
		var a, b [6]float64
		quinticWeights(0, &a)
		quinticDerivWeights(0, &b)
		wv, wd = a[:5], b[:5]
	}
	r := len(wv) / 2 // support radius: nodes −r … r
	cs := s.cs
	// The x sums of coefficient row y+j (value and derivative weights)
	// are computed once per row and kept in a ring of 2r+1 rows; the y
	// sums then combine them in the order −r … r, the same operations as
	// summing each pixel's neighbourhood directly.
	nr := 2*r + 1
	var vs, ds [5][]float64
	buf := make([]float64, 2*nr*w)
	for k := 0; k < nr; k++ {
		vs[k] = buf[2*k*w : (2*k+1)*w : (2*k+1)*w]
		ds[k] = buf[(2*k+1)*w : (2*k+2)*w : (2*k+2)*w]
	}
	xsums := func(yy int, v, d []float64) {
		base := (yy+pad)*cs + pad - r
		if nr == 3 {
			w0, w1, w2 := wv[0], wv[1], wv[2]
			d0, d1, d2 := wd[0], wd[1], wd[2]
			src := s.c[base : base+w+2]
			v, d = v[:w], d[:w]
			for x := range v {
				c0, c1, c2 := src[x], src[x+1], src[x+2]
				a, b := 0.0, 0.0
				a += w0 * c0
				b += d0 * c0
				a += w1 * c1
				b += d1 * c1
				a += w2 * c2
				b += d2 * c2
				v[x], d[x] = a, b
			}
			return
		}
		// quintic
		{
			w0, w1, w2, w3, w4 := wv[0], wv[1], wv[2], wv[3], wv[4]
			d0, d1, d2, d3, d4 := wd[0], wd[1], wd[2], wd[3], wd[4]
			src := s.c[base : base+w+4]
			v, d = v[:w], d[:w]
			for x := range v {
				c := (*[5]float64)(src[x:])
				a, b := 0.0, 0.0
				a += w0 * c[0]
				b += d0 * c[0]
				a += w1 * c[1]
				b += d1 * c[1]
				a += w2 * c[2]
				b += d2 * c[2]
				a += w3 * c[3]
				b += d3 * c[3]
				a += w4 * c[4]
				b += d4 * c[4]
				v[x], d[x] = a, b
			}
		}
	}
	for k := 0; k < nr-1; k++ {
		xsums(y0-r+k, vs[k], ds[k])
	}
	for y := y0; y < y1; y++ {
		k := (y - y0 + nr - 1) % nr
		xsums(y+r, vs[k], ds[k])
		var vr, dr [5][]float64 // rows y−r … y+r
		for j := 0; j < nr; j++ {
			q := (y - y0 + j) % nr
			vr[j], dr[j] = vs[q][:w], ds[q][:w]
		}
		ox, oy := gx[y*w:(y+1)*w], gy[y*w:(y+1)*w]
		if nr == 3 {
			w0, w1, w2 := wv[0], wv[1], wv[2]
			d0, d1, d2 := wd[0], wd[1], wd[2]
			v0, v1, v2 := vr[0], vr[1], vr[2]
			e0, e1, e2 := dr[0], dr[1], dr[2]
			oy = oy[:len(ox)]
			v0, v1, v2 = v0[:len(ox)], v1[:len(ox)], v2[:len(ox)]
			e0, e1, e2 = e0[:len(ox)], e1[:len(ox)], e2[:len(ox)]
			for x := range ox {
				sx, sy := 0.0, 0.0
				sx += w0 * e0[x]
				sy += d0 * v0[x]
				sx += w1 * e1[x]
				sy += d1 * v1[x]
				sx += w2 * e2[x]
				sy += d2 * v2[x]
				ox[x] = float32(sx)
				oy[x] = float32(sy)
			}
			continue
		}
		// quintic
		{
			w0, w1, w2, w3, w4 := wv[0], wv[1], wv[2], wv[3], wv[4]
			d0, d1, d2, d3, d4 := wd[0], wd[1], wd[2], wd[3], wd[4]
			v0, v1, v2, v3, v4 := vr[0], vr[1], vr[2], vr[3], vr[4]
			e0, e1, e2, e3, e4 := dr[0], dr[1], dr[2], dr[3], dr[4]
			n := len(ox)
			oy = oy[:n]
			v0, v1, v2, v3, v4 = v0[:n], v1[:n], v2[:n], v3[:n], v4[:n]
			e0, e1, e2, e3, e4 = e0[:n], e1[:n], e2[:n], e3[:n], e4[:n]
			for x := range ox {
				sx, sy := 0.0, 0.0
				sx += w0 * e0[x]
				sy += d0 * v0[x]
				sx += w1 * e1[x]
				sy += d1 * v1[x]
				sx += w2 * e2[x]
				sy += d2 * v2[x]
				sx += w3 * e3[x]
				sy += d3 * v3[x]
				sx += w4 * e4[x]
				sy += d4 * v4[x]
				ox[x] = float32(sx)
				oy[x] = float32(sy)
			}
		}
	}
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

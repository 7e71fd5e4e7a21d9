package spline

// The prefilter: the steps that turn an image into B-spline coefficients
// (Build), its checks, the mirrored margins and the recursive filters.

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
			b.bad[y] = firstNonFinite(src)
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
	// The gain goes first over the samples the first causal sum reads,
	// and is then taken into the first causal recursion (fused).
	g := gainedPrefix(n, poles[0])
	for i := range r0[:g] {
		r0[i] *= gain
		r1[i] *= gain
		r2[i] *= gain
		r3[i] *= gain
	}
	last := n - 1
	for p, z := range poles {
		r0[0] = causalInit(r0, 1, n, z)
		r1[0] = causalInit(r1, 1, n, z)
		r2[0] = causalInit(r2, 1, n, z)
		r3[0] = causalInit(r3, 1, n, z)
		i := 1
		if p == 0 {
			for ; i < g; i++ {
				r0[i] += float64(z * r0[i-1])
				r1[i] += float64(z * r1[i-1])
				r2[i] += float64(z * r2[i-1])
				r3[i] += float64(z * r3[i-1])
			}
			for ; i < len(r0); i++ {
				r0[i] = float64(r0[i]*gain) + float64(z*r0[i-1])
				r1[i] = float64(r1[i]*gain) + float64(z*r1[i-1])
				r2[i] = float64(r2[i]*gain) + float64(z*r2[i-1])
				r3[i] = float64(r3[i]*gain) + float64(z*r3[i-1])
			}
		}
		for ; i < len(r0); i++ {
			r0[i] += float64(z * r0[i-1])
			r1[i] += float64(z * r1[i-1])
			r2[i] += float64(z * r2[i-1])
			r3[i] += float64(z * r3[i-1])
		}
		f := z / (float64(z*z) - 1)
		r0[last] = f * (float64(z*r0[last-1]) + r0[last])
		r1[last] = f * (float64(z*r1[last-1]) + r1[last])
		r2[last] = f * (float64(z*r2[last-1]) + r2[last])
		r3[last] = f * (float64(z*r3[last-1]) + r3[last])
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
func (b *Build) Err() error { return badSample(b.bad, b.g) }

// firstNonFinite returns 1 + the index of the first NaN or ±Inf in row,
// or 0 if there is none: the per-row record of Build and Smoothing.
func firstNonFinite(row []float32) int32 {
	for x, v := range row {
		if f := float64(v); math.IsNaN(f) || math.IsInf(f, 0) {
			return int32(x + 1)
		}
	}
	return 0
}

// badSample reports the first non-finite sample of g, in row-major order,
// from bad, the per-row records of firstNonFinite.
func badSample(bad []int32, g *imageio.Gray) error {
	for y, x := range bad {
		if x != 0 {
			return fmt.Errorf("spline: pixel (%d, %d) is %v: want finite grey levels", x-1, y, g.Pix[y*g.Stride+int(x)-1])
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
			c[i] += float64(z * c[i-stride])
		}
		c[last] = (z / (float64(z*z) - 1)) * (float64(z*c[last-stride]) + c[last])
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
	// As in filterRows4: the gain over the rows the first causal sums
	// read, then fused into the first causal recursion.
	g := gainedPrefix(n, poles[0])
	for i := 0; i < g; i++ {
		row := c[i*stride : i*stride+nc]
		for k := range row {
			row[k] *= gain
		}
	}
	last := (n - 1) * stride
	for p, z := range poles {
		for k := 0; k < nc; k++ {
			c[k] = causalInit(c[k:], stride, n, z)
		}
		i := stride
		if p == 0 {
			for ; i < g*stride; i += stride {
				cur, prev := c[i:i+nc], c[i-stride:i-stride+nc]
				for k := range cur {
					cur[k] += float64(z * prev[k])
				}
			}
			for ; i <= last; i += stride {
				cur, prev := c[i:i+nc], c[i-stride:i-stride+nc]
				prev = prev[:len(cur)]
				for k := range cur {
					cur[k] = float64(cur[k]*gain) + float64(z*prev[k])
				}
			}
		}
		for ; i <= last; i += stride {
			cur, prev := c[i:i+nc], c[i-stride:i-stride+nc]
			for k := range cur {
				cur[k] += float64(z * prev[k])
			}
		}
		end, prev := c[last:last+nc], c[last-stride:last-stride+nc]
		for k := range end {
			end[k] = (z / (float64(z*z) - 1)) * (float64(z*prev[k]) + end[k])
		}
		for i := last - stride; i >= 0; i -= stride {
			cur, next := c[i:i+nc], c[i+stride:i+stride+nc]
			for k := range cur {
				cur[k] = z * (next[k] - cur[k])
			}
		}
	}
}

// horizon is the number of samples causalInit sums for pole z when the
// signal is longer: the terms beyond are below 1e-17 relative.
func horizon(z float64) int {
	return int(math.Ceil(math.Log(1e-17) / math.Log(math.Abs(z))))
}

// gainedPrefix returns how many leading samples of a signal of n the
// filters scale by the gain before the first causal recursion: those that
// causalInit reads for the first pole z (all n when it reads them all).
// The others are scaled inside that recursion, with the same two
// roundings in the same order (the product, then the sum).
func gainedPrefix(n int, z float64) int {
	if h := horizon(z); h < n {
		return h
	}
	return n
}

// causalInit returns c⁺(0) = Σ_{k=0}^{2n−3} z^k s(k) (mirror-extended s)
// divided by 1 − z^(2n−2). Terms below 1e-17 relative are dropped, which is
// exact in float64.
func causalInit(c []float64, stride, n int, z float64) float64 {
	if horizon := horizon(z); horizon < n {
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

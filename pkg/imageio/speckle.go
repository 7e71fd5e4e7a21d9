package imageio

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/dsp/fourier"
)

// Autocorrelation returns the normalised autocovariance ρ(h) of g along
// the x and the y axis for lags h = 0 … maxLag px (ρ(0) = 1). It is
// computed with FFTs (gonum dsp/fourier) on the mean-removed image,
// zero-padded so nothing wraps around, and each lag is divided by its
// number of overlapping pixel pairs (the unbiased estimate).
func Autocorrelation(g *Gray, maxLag int) (ax, ay []float64, err error) {
	if g == nil || g.W < 2 || g.H < 2 {
		return nil, nil, fmt.Errorf("%w: autocorrelation needs an image at least 2×2 px", ErrTooSmall)
	}
	maxLag = min(maxLag, g.W-1, g.H-1)
	mean, std, _, _ := Stats(g)
	if std == 0 {
		return nil, nil, fmt.Errorf("%w: uniform image has no autocorrelation", ErrNoContrast)
	}
	nx, ny := g.W+maxLag+1, g.H+maxLag+1
	nx, ny = fastLen(nx), fastLen(ny)
	a := make([]complex128, nx*ny)
	for y := 0; y < g.H; y++ {
		for x := 0; x < g.W; x++ {
			a[y*nx+x] = complex(float64(g.Pix[y*g.Stride+x])-mean, 0)
		}
	}
	fx, fy := fourier.NewCmplxFFT(nx), fourier.NewCmplxFFT(ny)
	col := make([]complex128, ny)
	// Forward 2D transform: rows, then columns.
	for y := 0; y < g.H; y++ { // padded rows are zero and stay zero
		r := a[y*nx : (y+1)*nx]
		fx.Coefficients(r, r)
	}
	for x := 0; x < nx; x++ {
		for y := 0; y < ny; y++ {
			col[y] = a[y*nx+x]
		}
		fy.Coefficients(col, col)
		for y := 0; y < ny; y++ {
			c := col[y]
			col[y] = complex(real(c)*real(c)+imag(c)*imag(c), 0)
		}
		fy.Sequence(col, col)
		for y := 0; y < ny; y++ {
			a[y*nx+x] = col[y]
		}
	}
	// Only row 0 (x axis) and column 0 (y axis) of the inverse are needed.
	r0 := make([]complex128, nx)
	copy(r0, a[:nx])
	fx.Sequence(r0, r0)
	c0 := make([]complex128, ny)
	for y := 0; y < ny; y++ {
		// Inverse along x evaluated at x = 0 is the plain sum over the row.
		var s complex128
		for x := 0; x < nx; x++ {
			s += a[y*nx+x]
		}
		c0[y] = s
	}
	ax = make([]float64, maxLag+1)
	ay = make([]float64, maxLag+1)
	for h := 0; h <= maxLag; h++ {
		ax[h] = real(r0[h]) / float64((g.W-h)*g.H)
		ay[h] = real(c0[h]) / float64(g.W*(g.H-h))
	}
	x0, y0 := ax[0], ay[0]
	for h := range ax {
		ax[h] /= x0
		ay[h] /= y0
	}
	return ax, ay, nil
}

// fastLen returns the smallest n' ≥ n whose prime factors are 2, 3 and 5.
func fastLen(n int) int {
	for ; ; n++ {
		m := n
		for _, p := range []int{2, 3, 5} {
			for m%p == 0 {
				m /= p
			}
		}
		if m == 1 {
			return n
		}
	}
}

// MaxSpeckleWindow is the side of the centred window that HWHM and
// SpeckleSize analyse in larger images, to bound time and memory.
const MaxSpeckleWindow = 512

// HWHM returns the half width at half maximum of the image autocorrelation
// along x and along y, in px: the lag at which ρ first falls to ½, linearly
// interpolated between integer lags. Images larger than
// MaxSpeckleWindow px in either direction are analysed in a centred window
// of that size. Image noise lowers ρ at every non-zero lag and so shortens
// the estimate slightly.
//
// The lags are summed directly, four per pass along both axes (each in
// its own accumulator, in one fixed order, see lagTable), until ρ has
// fallen to ½ along both axes (at most 64 lags): the same unbiased, mean-removed
// estimate that Autocorrelation computes with FFTs, equal to it up to
// rounding, at a cost of a few passes over the window for speckles a few
// px across instead of a padded 2D transform.
func HWHM(g *Gray) (hx, hy float64, err error) {
	if g == nil {
		return 0, 0, fmt.Errorf("%w: no image", ErrTooSmall)
	}
	if g.W > MaxSpeckleWindow || g.H > MaxSpeckleWindow {
		w, h := min(g.W, MaxSpeckleWindow), min(g.H, MaxSpeckleWindow)
		g = g.Sub((g.W-w)/2, (g.H-h)/2, w, h)
	}
	if g.W < 2 || g.H < 2 {
		return 0, 0, fmt.Errorf("%w: autocorrelation needs an image at least 2×2 px", ErrTooSmall)
	}
	maxLag := min(64, g.W/4, g.H/4, g.W-1, g.H-1)
	t := newLagTable(g, maxLag)
	if t.c0 == 0 { // every pixel is the mean
		return 0, 0, fmt.Errorf("%w: uniform image has no autocorrelation", ErrNoContrast)
	}
	hx, okx := halfLag(func(h int) float64 { return t.x(h) / float64((g.W-h)*g.H) }, maxLag)
	hy, oky := halfLag(func(h int) float64 { return t.y(h) / float64(g.W*(g.H-h)) }, maxLag)
	if !okx || !oky {
		return hx, hy, fmt.Errorf("%w: the autocorrelation stays above ½ up to %d px: speckles too large for a %d×%d px image",
			ErrTooSmall, maxLag, g.W, g.H)
	}
	return hx, hy, nil
}

// halfLag evaluates the autocovariance c(h) for h = 0, 1, … up to maxLag
// and returns where c(h)/c(0) first falls to ½, linearly interpolated
// between integer lags, stopping there.
func halfLag(c func(h int) float64, maxLag int) (float64, bool) {
	c0 := c(0)
	prev := 1.0
	for h := 1; h <= maxLag; h++ {
		r := c(h) / c0
		if r <= 0.5 {
			return float64(h-1) + (prev-0.5)/(prev-r), true
		}
		prev = r
	}
	return math.NaN(), false
}

// lagBlock is the number of lags along each axis that lagTable sums in
// one pass.
const lagBlock = 4

// lagTable holds the lag sums of an image (lagSum along x and along y)
// as HWHM asks for them. They are summed lagBlock lags at a time in one
// pass over the image, each lag's products of deviations from the mean in
// its own accumulator in lagSum's order, so the sums are lagSum's bit for
// bit while the accumulators' additions overlap instead of waiting on
// each other. Lag 0 is the same along both axes.
type lagTable struct {
	g      *Gray
	mean   float64
	maxLag int
	c0     float64
	cx, cy []float64 // lags 1, 2, … summed so far
}

// newLagTable returns the lag table of g up to maxLag, with its mean
// taken as Stats takes it and lag 0 summed (with the first block).
func newLagTable(g *Gray, maxLag int) *lagTable {
	var s float64
	for y := 0; y < g.H; y++ {
		for _, v := range g.Pix[y*g.Stride : y*g.Stride+g.W] {
			s += float64(v)
		}
	}
	t := &lagTable{g: g, mean: s / float64(g.W*g.H), maxLag: maxLag}
	if maxLag >= lagBlock {
		t.next() // sums lag 0 too
		return t
	}
	t.c0 = t.lagX(0)
	return t
}

// x returns lagSum(g, mean, h, 1).
func (t *lagTable) x(h int) float64 {
	if h == 0 {
		return t.c0
	}
	for len(t.cx) < h {
		t.next()
	}
	return t.cx[h-1]
}

// y returns lagSum(g, mean, h, g.Stride).
func (t *lagTable) y(h int) float64 {
	if h == 0 {
		return t.c0
	}
	for len(t.cy) < h {
		t.next()
	}
	return t.cy[h-1]
}

// row returns row y of the image.
func (t *lagTable) row(y int) []float32 {
	return t.g.Pix[y*t.g.Stride : y*t.g.Stride+t.g.W]
}

// next sums the next lagBlock lags along both axes (and lag 0 with the
// first), or the next one near maxLag.
func (t *lagTable) next() {
	l := len(t.cx) + 1
	if l+lagBlock-1 > t.maxLag {
		t.cx, t.cy = append(t.cx, t.lagX(l)), append(t.cy, t.lagY(l))
		return
	}
	w, h, m := t.g.W, t.g.H, t.mean
	var sx, sy [lagBlock]float64
	var s0 float64              // lag 0, kept from the first block
	n := w - (l + lagBlock - 1) // x below n has all lagBlock partners in its row
	for y := 0; y < h; y++ {
		a := t.row(y)
		var r0, r1, r2, r3, rz float64
		for x, v := range a[:n] {
			b := a[x+l : x+l+lagBlock]
			d := float64(v) - m
			rz += d * d
			r0 += d * (float64(b[0]) - m)
			r1 += d * (float64(b[1]) - m)
			r2 += d * (float64(b[2]) - m)
			r3 += d * (float64(b[3]) - m)
		}
		for _, v := range a[n:] {
			d := float64(v) - m
			rz += d * d
		}
		s0 += rz
		for x := n; x < w-l-2; x++ {
			r2 += (float64(a[x]) - m) * (float64(a[x+l+2]) - m)
		}
		for x := n; x < w-l-1; x++ {
			r1 += (float64(a[x]) - m) * (float64(a[x+l+1]) - m)
		}
		for x := n; x < w-l; x++ {
			r0 += (float64(a[x]) - m) * (float64(a[x+l]) - m)
		}
		sx[0], sx[1], sx[2], sx[3] = sx[0]+r0, sx[1]+r1, sx[2]+r2, sx[3]+r3
		if y+l+lagBlock-1 >= h {
			for i := range lagBlock {
				if y+l+i < h {
					sy[i] += rowDot(a, t.row(y+l+i), m)
				}
			}
			continue
		}
		b0, b1, b2, b3 := t.row(y+l), t.row(y+l+1), t.row(y+l+2), t.row(y+l+3)
		var q0, q1, q2, q3 float64
		for x, v := range a {
			d := float64(v) - m
			q0 += d * (float64(b0[x]) - m)
			q1 += d * (float64(b1[x]) - m)
			q2 += d * (float64(b2[x]) - m)
			q3 += d * (float64(b3[x]) - m)
		}
		sy[0], sy[1], sy[2], sy[3] = sy[0]+q0, sy[1]+q1, sy[2]+q2, sy[3]+q3
	}
	if l == 1 {
		t.c0 = s0
	}
	t.cx, t.cy = append(t.cx, sx[:]...), append(t.cy, sy[:]...)
}

// lagX is lagSum along x at lag l.
func (t *lagTable) lagX(l int) float64 {
	var s float64
	for y := 0; y < t.g.H; y++ {
		a := t.row(y)
		s += rowDot(a[:t.g.W-l], a[l:], t.mean)
	}
	return s
}

// lagY is lagSum along y at lag l.
func (t *lagTable) lagY(l int) float64 {
	var s float64
	for y := 0; y+l < t.g.H; y++ {
		s += rowDot(t.row(y), t.row(y+l), t.mean)
	}
	return s
}

// rowDot returns Σ (a[x] − m)·(b[x] − m) over x < len(a), in order of x.
func rowDot(a, b []float32, m float64) float64 {
	var s float64
	for x, v := range a {
		s += (float64(v) - m) * (float64(b[x]) - m)
	}
	return s
}

// SpeckleSize returns the autocorrelation speckle size of g in px: twice
// the half width at half maximum of the image autocorrelation, averaged
// over x and y (the autocorrelation measure the iDICs Good Practices Guide,
// 2018, suggests for speckle size). It is a statistical size, not a disc
// diameter: for a Boolean pattern of hard-edged discs of diameter d it is
// about 0.81 d at low coverage and 0.66 d at 50 % coverage (from the disc
// overlap area and the Boolean-model covariance, Matheron 1975), before
// pixel integration widens it: 5 px discs at 50 % coverage imaged with
// square pixels measure about 4.0 px (see the synth package tests).
func SpeckleSize(g *Gray) (float64, error) {
	hx, hy, err := HWHM(g)
	if err != nil {
		return 0, err
	}
	return hx + hy, nil
}

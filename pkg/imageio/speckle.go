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
// The lags are summed directly, one at a time, until ρ has fallen to ½
// along both axes (at most 64 lags): the same unbiased, mean-removed
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
	mean, std, _, _ := Stats(g)
	if std == 0 {
		return 0, 0, fmt.Errorf("%w: uniform image has no autocorrelation", ErrNoContrast)
	}
	hx, okx := halfLag(func(h int) float64 { return lagSum(g, mean, h, 1) / float64((g.W-h)*g.H) }, maxLag)
	hy, oky := halfLag(func(h int) float64 { return lagSum(g, mean, h, g.Stride) / float64(g.W*(g.H-h)) }, maxLag)
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

// lagSum returns Σ (g(p) − mean)·(g(p + h·d) − mean) over the pixel pairs
// of g at lag h along the axis whose index step is d (1 = x, Stride = y).
func lagSum(g *Gray, mean float64, h, d int) float64 {
	w, ht := g.W, g.H
	if d == 1 {
		w -= h
	} else {
		ht -= h
	}
	off := h * d
	var s float64
	for y := 0; y < ht; y++ {
		a := g.Pix[y*g.Stride : y*g.Stride+w]
		b := g.Pix[y*g.Stride+off : y*g.Stride+off+w]
		var rs float64
		for x, v := range a {
			rs += (float64(v) - mean) * (float64(b[x]) - mean)
		}
		s += rs
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

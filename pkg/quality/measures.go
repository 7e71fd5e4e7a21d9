package quality

import (
	"errors"
	"fmt"
	"math"
	"math/bits"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
)

// Measures are the quality measures of one image. Grey levels are in the
// image's native scale (0–255 for 8-bit, 0–65535 for 16-bit files).
type Measures struct {
	// Width and Height are the image size in px.
	Width  int `json:"width"`
	Height int `json:"height"`
	// Pixels is the number of pixels measured (inside the ROI, if any).
	Pixels int `json:"pixels"`
	// Bits is the bit depth of the file (8 or 16; 0 for a computed image).
	Bits int `json:"bits"`
	// SignalBits is the bit depth the levels actually use: 8, 10, 12, 14
	// or 16. A 16-bit file whose levels never exceed 4095 is taken as a
	// 12-bit camera, and one whose levels are all multiples of 16 as a
	// 12-bit camera with its samples shifted left.
	SignalBits int `json:"signal_bits"`
	// FullScale is the grey level at which the sensor saturates:
	// 2^SignalBits − 1, times the left shift.
	FullScale float64 `json:"full_scale"`
	// Mean, Std, Min and Max are grey-level statistics (Std is the
	// population standard deviation).
	Mean float64 `json:"mean"`
	Std  float64 `json:"std"`
	Min  float64 `json:"min"`
	Max  float64 `json:"max"`
	// Saturated is the fraction of pixels at or above FullScale.
	Saturated float64 `json:"saturated_fraction"`
	// Clipped is the fraction of pixels at or below 0 (black-clipped).
	Clipped float64 `json:"black_clipped_fraction"`
	// UsedRange is the span between the 0.1 % and the 99.9 % percentile
	// grey levels as a fraction of FullScale.
	UsedRange float64 `json:"used_range"`
	// UsedLevels is the number of distinct grey levels in that span (its
	// width divided by the quantisation step, plus one); UsedBits is its
	// base-2 logarithm, the bit depth the pattern really uses.
	UsedLevels int     `json:"used_levels"`
	UsedBits   float64 `json:"used_bits"`
	// MeanGradient is the mean intensity gradient δ_f: the mean of
	// √(fx² + fy²) over the pixels whose 3×3 neighbourhood is measured, with
	// the Sobel operator divided by 8 (grey levels per px; Pan, Lu & Xie
	// 2010).
	MeanGradient float64 `json:"mean_gradient"`
	// SpeckleSize is the autocorrelation speckle size in px
	// (imageio.SpeckleSize), NaN when it cannot be measured; SpeckleError
	// then says why. In an image wider or higher than
	// imageio.MaxSpeckleWindow (512 px) it is measured in the centred
	// window of that size, whatever the ROI: an estimate of the whole
	// image's, within 3 % of it on stationary test patterns
	// (TestSpeckleWindow).
	SpeckleSize  float64 `json:"speckle_size_px"`
	SpeckleError string  `json:"speckle_error,omitempty"`
	// EdgeWidth is the blur indicator: the width in px of the sharpest
	// speckle edges, the used grey span (UsedRange·FullScale) divided by
	// the 99th percentile of the Sobel gradient magnitude. An in-focus
	// image of speckles a few px across gives about 1.5–2.5 px (pixel
	// integration alone spreads an edge over about a pixel); a Gaussian
	// blur of σ px spreads an isolated edge to √(2π)·σ ≈ 2.5σ (the peak
	// slope of a blurred step of height C is C/(σ√(2π))). Fine speckles
	// that never reach full contrast read wider than they are. NaN on a
	// uniform image.
	EdgeWidth float64 `json:"edge_width_px"`
	// Noise is the noise σ estimated from this image alone
	// (NoiseFromImage), grey levels; NaN if it could not be estimated.
	// Images of more than 4 Mpx are sampled on every k-th row and column
	// (the smallest k that leaves at most 2²² pixels).
	Noise float64 `json:"noise_sigma"`
}

// Clean returns m with NaN and infinite values replaced by 0, so it encodes
// as JSON (which has no NaN); SpeckleError still tells a missing speckle
// size apart.
func (m Measures) Clean() Measures {
	for _, p := range []*float64{&m.FullScale, &m.Mean, &m.Std, &m.Min, &m.Max, &m.Saturated, &m.Clipped,
		&m.UsedRange, &m.UsedBits, &m.MeanGradient, &m.SpeckleSize, &m.EdgeWidth, &m.Noise} {
		if math.IsNaN(*p) || math.IsInf(*p, 0) {
			*p = 0
		}
	}
	return m
}

// ErrEmpty is returned (wrapped) when there are no pixels to measure.
var ErrEmpty = errors.New("quality: nothing to measure")

// Measure computes the quality measures of g over the pixels inside mask
// (nil = the whole image). It fails only when g is nil or empty, the mask
// does not match the image or holds no pixel; a measure that cannot be
// computed (a speckle size on a uniform image) is NaN with a reason.
func Measure(g *imageio.Gray, mask *roi.Mask) (Measures, error) {
	if g == nil || g.W <= 0 || g.H <= 0 || len(g.Pix) == 0 {
		return Measures{}, fmt.Errorf("%w: the image is empty", ErrEmpty)
	}
	if mask != nil && (mask.W != g.W || mask.H != g.H) {
		return Measures{}, fmt.Errorf("quality: ROI mask is %d×%d px but the image is %d×%d px; use a mask made for this image",
			mask.W, mask.H, g.W, g.H)
	}
	in := func(x, y int) bool { return mask == nil || mask.Inside(x, y) }
	whole := mask == nil
	m := Measures{Width: g.W, Height: g.H, Bits: g.Bits, SpeckleSize: math.NaN(), EdgeWidth: math.NaN(), Noise: math.NaN()}

	// Pass 1: count, moments, range, and the common power-of-two step of
	// integer levels.
	var n int
	var s, ss float64
	lo, hi := math.Inf(1), math.Inf(-1)
	integer := true
	var orBits uint64
	for y := 0; y < g.H; y++ {
		row := g.Pix[y*g.Stride : y*g.Stride+g.W]
		for x, v := range row {
			if !whole && !in(x, y) {
				continue
			}
			f := float64(v)
			if math.IsNaN(f) || math.IsInf(f, 0) {
				return Measures{}, fmt.Errorf("quality: pixel (%d, %d) is %v; the image holds invalid values", x, y, f)
			}
			n++
			s += f
			if f < lo {
				lo = f
			}
			if f > hi {
				hi = f
			}
			if integer {
				if f != math.Trunc(f) || f < 0 || f > 65535 {
					integer = false
				} else {
					orBits |= uint64(f)
				}
			}
		}
	}
	if n == 0 {
		return Measures{}, fmt.Errorf("%w: the ROI holds no pixel of the %d×%d px image", ErrEmpty, g.W, g.H)
	}
	m.Pixels = n
	m.Mean, m.Min, m.Max = s/float64(n), lo, hi
	for y := 0; y < g.H; y++ {
		for x, v := range g.Pix[y*g.Stride : y*g.Stride+g.W] {
			if whole || in(x, y) {
				d := float64(v) - m.Mean
				ss += d * d
			}
		}
	}
	m.Std = math.Sqrt(ss / float64(n))

	// Bit depth and full scale.
	quantum := 1.0
	if integer && orBits != 0 {
		quantum = float64(uint64(1) << bits.TrailingZeros64(orBits))
	}
	m.SignalBits, m.FullScale = signalDepth(g.Bits, hi, quantum, integer)

	// Pass 2: saturated and clipped pixels, and the histogram for the
	// percentiles.
	const nbin = 1 << 16
	hist := make([]int, nbin)
	width := hi - lo
	bin := func(f float64) int {
		if width == 0 {
			return 0
		}
		return min(nbin-1, int((f-lo)/width*(nbin-1)+0.5))
	}
	var sat, clip int
	for y := 0; y < g.H; y++ {
		for x, v := range g.Pix[y*g.Stride : y*g.Stride+g.W] {
			if !whole && !in(x, y) {
				continue
			}
			f := float64(v)
			if f >= m.FullScale {
				sat++
			}
			if f <= 0 {
				clip++
			}
			hist[bin(f)]++
		}
	}
	m.Saturated, m.Clipped = float64(sat)/float64(n), float64(clip)/float64(n)
	p0, p1 := percentile(hist, n, 0.001), percentile(hist, n, 0.999)
	level := func(b int) float64 { return lo + float64(b)*width/(nbin-1) }
	span := level(p1) - level(p0)
	m.UsedRange = span / m.FullScale
	step := quantum
	if !integer {
		step = width / (nbin - 1)
		if step == 0 {
			step = 1
		}
	}
	m.UsedLevels = int(math.Round(span/step)) + 1
	m.UsedBits = math.Log2(float64(m.UsedLevels))

	// Gradients and noise. Up to 1<<22 px, where NoiseFromImage reads
	// every pixel, one pass gives both their Sobel gradients.
	var p99 float64
	var noise float64
	var noiseErr error
	if g.W >= 3 && g.H >= 3 && g.W*g.H <= 1<<22 {
		nlo, nhi := lo, hi
		if !whole { // NoiseFromImage takes the whole image's range
			_, _, nlo, nhi = imageio.Stats(g)
		}
		r := responses(g, mask, nlo, nhi, true)
		m.MeanGradient, p99 = sobelOf(r)
		noise, noiseErr = noiseOf(r)
	} else {
		m.MeanGradient, p99 = sobelStats(g, mask)
		noise, noiseErr = NoiseFromImage(g, mask)
	}
	if p99 > 0 {
		m.EdgeWidth = span / p99
	}
	if sz, err := imageio.SpeckleSize(g); err != nil {
		m.SpeckleError = err.Error()
	} else {
		m.SpeckleSize = sz
	}
	if noiseErr == nil {
		m.Noise = noise
	}
	return m, nil
}

// signalDepth returns the bit depth the levels use and the saturation
// level. 8- and 12-bit sources are taken at their word; a 16-bit (or
// computed integer) image is given the narrowest camera depth of 10, 12,
// 14 or 16 bits that holds its levels after undoing a left shift by the
// common power-of-two step quantum, so a 12-bit camera in a 16-bit file
// saturates at 4095 (or 65520 when shifted left by 4).
func signalDepth(fileBits int, hi, quantum float64, integer bool) (int, float64) {
	switch {
	case !integer && hi <= 255, fileBits == 8, fileBits == 0 && hi <= 255:
		return 8, 255
	case !integer:
		return 16, 65535
	case fileBits == 12:
		return 12, 4095
	}
	top := hi / quantum
	for _, b := range []int{10, 12, 14} {
		if fs := float64(int(1)<<b - 1); top <= fs {
			return b, fs * quantum
		}
	}
	return 16, 65535
}

// percentile returns the histogram bin at which the cumulative count first
// reaches the fraction p of n.
func percentile(hist []int, n int, p float64) int {
	target := int(math.Ceil(p * float64(n)))
	target = max(target, 1)
	c := 0
	for i, h := range hist {
		c += h
		if c >= target {
			return i
		}
	}
	return len(hist) - 1
}

// insideR reports whether the (2r+1)×(2r+1) neighbourhood of (x, y) lies in
// the image and the mask.
func insideR(mask *roi.Mask, w, h, x, y, r int) bool {
	if x < r || y < r || x >= w-r || y >= h-r {
		return false
	}
	return mask == nil || mask.RectInside(x-r, y-r, x+r, y+r)
}

// sobelStats returns the mean and the 99th percentile of the Sobel
// gradient magnitude (kernel divided by 8) over the pixels whose 3×3
// neighbourhood is measured; NaN, 0 if there is none. Two passes (the
// second fills a histogram up to the largest magnitude) keep the memory
// independent of the image size.
// sobelOf is sobelStats from the responses of every pixel whose 3×3
// neighbourhood lies in the mask (responses with all set): the magnitude
// √((gx/8)² + (gy/8)²) is √(grad/64) bit for bit, as the divisions by
// powers of two are exact.
func sobelOf(r []resp) (mean, p99 float64) {
	if len(r) == 0 {
		return math.NaN(), 0
	}
	var s, top float64
	for _, v := range r {
		mag := math.Sqrt(v.grad / 64)
		s += mag
		if mag > top {
			top = mag
		}
	}
	if top > 0 {
		const nbin = 1 << 14
		hist := make([]int, nbin)
		for _, v := range r {
			hist[min(nbin-1, int(math.Sqrt(v.grad/64)/top*(nbin-1)+0.5))]++
		}
		p99 = float64(percentile(hist, len(r), 0.99)) * top / (nbin - 1)
	}
	return s / float64(len(r)), p99
}

func sobelStats(g *imageio.Gray, mask *roi.Mask) (mean, p99 float64) {
	if g.W < 3 || g.H < 3 {
		return math.NaN(), 0
	}
	p, st := g.Pix, g.Stride
	// each calls f with the magnitudes of one row, so the loop over the
	// pixels has no call in it; mag holds them.
	mag := make([]float64, g.W)
	each := func(f func(row []float64)) {
		for y := 1; y < g.H-1; y++ {
			row := mag[:0]
			for x := 1; x < g.W-1; x++ {
				if mask != nil && !insideR(mask, g.W, g.H, x, y, 1) {
					continue
				}
				i := y*st + x
				a, b, c := float64(p[i-st-1]), float64(p[i-st]), float64(p[i-st+1])
				d, e := float64(p[i-1]), float64(p[i+1])
				q, h, k := float64(p[i+st-1]), float64(p[i+st]), float64(p[i+st+1])
				gx := (c + 2*e + k - a - 2*d - q) / 8
				gy := (q + 2*h + k - a - 2*b - c) / 8
				row = append(row, math.Sqrt(gx*gx+gy*gy))
			}
			f(row)
		}
	}
	var s, top float64
	n := 0
	each(func(row []float64) {
		for _, v := range row {
			s += v
			if v > top {
				top = v
			}
		}
		n += len(row)
	})
	if n == 0 {
		return math.NaN(), 0
	}
	if top > 0 {
		const nbin = 1 << 14
		hist := make([]int, nbin)
		each(func(row []float64) {
			for _, v := range row {
				hist[min(nbin-1, int(v/top*(nbin-1)+0.5))]++
			}
		})
		p99 = float64(percentile(hist, n, 0.99)) * top / (nbin - 1)
	}
	return s / float64(n), p99
}

package quality

import (
	"fmt"
	"math"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
)

// NoiseFromPair returns the image noise σ in grey levels from a static
// pair: two images of the unloaded, unmoved specimen. With independent
// noise of equal σ in each, Var(a − b) = 2σ², so σ = std(a − b)/√2 over the
// mask (nil = whole image), after removing the mean difference (a change of
// brightness). This is the noise floor from stationary images that the
// iDICs Good Practices Guide (2018) asks for. Any motion or change of
// lighting between the images inflates the estimate. correlate.EstimateNoise
// calls this.
func NoiseFromPair(a, b *imageio.Gray, mask *roi.Mask) (float64, error) {
	if a == nil || b == nil || a.W*a.H == 0 || b.W*b.H == 0 {
		return 0, fmt.Errorf("%w: static pair: both images are needed", ErrEmpty)
	}
	if a.W != b.W || a.H != b.H {
		return 0, fmt.Errorf("quality: static pair: %d×%d px and %d×%d px; both images must come from the same camera and crop",
			a.W, a.H, b.W, b.H)
	}
	if mask != nil && (mask.W != a.W || mask.H != a.H) {
		return 0, fmt.Errorf("quality: static pair: ROI mask is %d×%d px but the images are %d×%d px", mask.W, mask.H, a.W, a.H)
	}
	var n, s, ss float64
	for y := 0; y < a.H; y++ {
		for x := 0; x < a.W; x++ {
			if mask != nil && !mask.Inside(x, y) {
				continue
			}
			d := float64(a.Pix[y*a.Stride+x]) - float64(b.Pix[y*b.Stride+x])
			n++
			s += d
			ss += d * d
		}
	}
	if n < 2 {
		return 0, fmt.Errorf("%w: static pair: the ROI holds fewer than two pixels", ErrEmpty)
	}
	mean := s / n
	v := (ss - n*mean*mean) / (n - 1)
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, fmt.Errorf("quality: static pair: the noise estimate is not finite; the images hold invalid values")
	}
	return math.Sqrt(math.Max(v, 0) / 2), nil
}

// NoiseFromImage estimates the noise σ of a single image, in grey levels.
// It filters g with the mask N = [1 −2 1; −2 4 −2; 1 −2 1], which removes
// smooth image content and turns white noise of σ into noise of 6σ
// (Immerkær 1996, "Fast noise variance estimation", Comput. Vis. Image
// Underst. 64(2):300: σ = √(π/2)·mean|N|/6). Speckle edges would dominate
// that mean, so it is taken only over the fifth of the pixels with the
// smallest Sobel gradient, the flattest parts of the pattern. N is even and
// the Sobel kernels are odd, so for white noise the two responses are
// uncorrelated and the choice does not bias the noise part of N. Saturated
// and black-clipped pixels (where the noise is cut off) are left out.
// Blur, fine speckles or a smooth illumination gradient still leak some
// pattern in and make the estimate high; measure the noise from a static
// pair (NoiseFromPair) when it matters.
func NoiseFromImage(g *imageio.Gray, mask *roi.Mask) (float64, error) {
	if g == nil || g.W < 3 || g.H < 3 {
		return 0, fmt.Errorf("%w: noise estimate needs an image of at least 3×3 px", ErrEmpty)
	}
	_, _, lo, hi := imageio.Stats(g)
	return noiseFromImage(g, mask, lo, hi)
}

// noiseFromImage is NoiseFromImage given the lowest and highest level of
// the whole image g (imageio.Stats), which Measure has already found.
func noiseFromImage(g *imageio.Gray, mask *roi.Mask, lo, hi float64) (float64, error) {
	if g == nil || g.W < 3 || g.H < 3 {
		return 0, fmt.Errorf("%w: noise estimate needs an image of at least 3×3 px", ErrEmpty)
	}
	return noiseOf(responses(g, mask, lo, hi, false))
}

// resp is one pixel's squared Sobel gradient, unscaled (gx² + gy² with the
// kernels' integer weights), and its absolute response to N; a negative n
// marks a pixel the noise estimate leaves out.
type resp struct{ grad, n float64 }

// responses returns the responses of the pixels of g whose 3×3
// neighbourhood lies in the mask, in raster order, for NoiseFromImage
// (every k-th row and column of a large image). With all set (Measure,
// images of at most 1<<22 px) it keeps every such pixel of every row and
// column and marks with n = −1 the ones the noise estimate leaves out, so
// that sobelStats can take its gradients from the same pass.
func responses(g *imageio.Gray, mask *roi.Mask, lo, hi float64, all bool) []resp {
	r := make([]resp, 0, (g.W-2)*(g.H-2))
	p, st := g.Pix, g.Stride
	// Every k-th row and column of large images: a few million pixels
	// fix the estimate well enough.
	k := 1
	for !all && (g.W/k)*(g.H/k) > 1<<22 {
		k++
	}
	clipLo, clipHi := lo <= 0, looksFullScale(hi)
	for y := 1; y < g.H-1; y += k {
		for x := 1; x < g.W-1; x += k {
			if mask != nil && !insideR(mask, g.W, g.H, x, y, 1) {
				continue
			}
			i := y*st + x
			a, b, c := float64(p[i-st-1]), float64(p[i-st]), float64(p[i-st+1])
			d, e, f := float64(p[i-1]), float64(p[i]), float64(p[i+1])
			q, h, j := float64(p[i+st-1]), float64(p[i+st]), float64(p[i+st+1])
			gx := c + 2*f + j - a - 2*d - q
			gy := q + 2*h + j - a - 2*b - c
			g2 := gx*gx + gy*gy
			if (e == lo && clipLo) || (e == hi && clipHi) {
				if all {
					r = append(r, resp{g2, -1})
				}
				continue
			}
			n := a + c + q + j - 2*(b+d+f+h) + 4*e
			if math.IsNaN(g2) || math.IsInf(g2, 0) || math.IsNaN(n) || math.IsInf(n, 0) {
				if all {
					r = append(r, resp{g2, -1})
				}
				continue // a NaN or infinite grey level tells nothing of the noise
			}
			r = append(r, resp{g2, math.Abs(n)})
		}
	}
	return r
}

// noiseOf is NoiseFromImage's estimate from the responses r, leaving out
// those with a negative n.
func noiseOf(r []resp) (float64, error) {
	used := 0
	for _, v := range r {
		if v.n >= 0 {
			used++
		}
	}
	if used < 50 {
		return 0, fmt.Errorf("%w: noise estimate needs at least 50 measured pixels", ErrEmpty)
	}
	// The fifth with the smallest gradient, from a histogram of the
	// gradient (a sort of millions of pixels would dominate the cost).
	var top float64
	for _, v := range r {
		if v.n >= 0 && v.grad > top {
			top = v.grad
		}
	}
	cut := math.Inf(1)
	if top > 0 {
		const nbin = 1 << 14
		hist := make([]int, nbin)
		for _, v := range r {
			if v.n >= 0 {
				hist[min(nbin-1, int(v.grad/top*nbin))]++
			}
		}
		b := percentile(hist, used, 0.2)
		cut = float64(b+1) * top / nbin
	}
	var s float64
	n := 0
	for _, v := range r {
		if v.n >= 0 && v.grad < cut {
			s += v.n
			n++
		}
	}
	return math.Sqrt(math.Pi/2) * s / float64(n) / 6, nil
}

// looksFullScale reports whether v is the top level of a 8-, 10-, 12-, 14-
// or 16-bit sensor.
func looksFullScale(v float64) bool {
	for _, b := range []int{8, 10, 12, 14, 16} {
		if v == float64(int(1)<<b-1) {
			return true
		}
	}
	return false
}

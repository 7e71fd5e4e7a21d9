package imageio

import (
	"errors"
	"fmt"
	"math"
)

// MinContrast is the smallest grey-level standard deviation CheckContrast
// accepts, in grey levels of the image's native scale. It only rejects
// images that are uniform to within rounding; a usable speckle pattern has
// a standard deviation of tens of grey levels (8-bit) or more.
const MinContrast = 0.5

// Stats returns the mean, the standard deviation and the range of the
// grey levels of g.
func Stats(g *Gray) (mean, std, min, max float64) {
	n := g.W * g.H
	if n == 0 {
		return 0, 0, 0, 0
	}
	min, max = math.Inf(1), math.Inf(-1)
	var s float64
	nan := false
	for y := 0; y < g.H; y++ {
		for _, v := range g.Pix[y*g.Stride : y*g.Stride+g.W] {
			f := float64(v)
			s += f
			if f < min {
				min = f
			}
			if f > max {
				max = f
			}
			nan = nan || f != f
		}
	}
	if nan { // as math.Min and math.Max would give
		min, max = math.NaN(), math.NaN()
	}
	mean = s / float64(n)
	var ss float64
	for y := 0; y < g.H; y++ {
		for _, v := range g.Pix[y*g.Stride : y*g.Stride+g.W] {
			d := float64(v) - mean
			ss += d * d
		}
	}
	return mean, math.Sqrt(ss / float64(n)), min, max
}

// CheckContrast returns an error wrapping ErrNoContrast if g is empty or
// its grey-level standard deviation is below MinContrast.
func CheckContrast(g *Gray) error {
	if g == nil || g.W*g.H == 0 {
		return fmt.Errorf("%w: the image is empty", ErrTooSmall)
	}
	if contrastShown(g) {
		return nil
	}
	return contrastOfStats(g)
}

// contrastOfStats is CheckContrast's decision from the whole image's
// statistics, without the shortcut over its first rows.
func contrastOfStats(g *Gray) error {
	mean, std, min, max := Stats(g)
	if min == max {
		return fmt.Errorf("%w: every pixel has grey level %g; photograph a speckle pattern "+
			"(dark and light spots about 3–5 px across) with the exposure set so it is neither black nor saturated",
			ErrNoContrast, min)
	}
	if std < MinContrast {
		return fmt.Errorf("%w: grey-level standard deviation %.3g (mean %.4g, range %g–%g) is below %g; "+
			"increase the pattern contrast or the exposure", ErrNoContrast, std, mean, min, max, MinContrast)
	}
	return nil
}

// contrastShown reports whether the first rows of g alone prove that g
// passes CheckContrast, so that a speckle image is not read whole twice.
// For any set S of n_S of the image's n pixels, the sum of (v − mean)²
// over the image is at least the sum of (v − mean_S)² over S, since
// mean_S minimises the sum over S: n·std² ≥ n_S·std_S². A bound of
// (2·MinContrast)², four times the least variance accepted, leaves
// rounding no say; a NaN or infinite pixel in S leaves it to the whole
// image. std_S > 0 also means that the levels differ.
func contrastShown(g *Gray) bool {
	rows := max(1, g.H/16)
	n := g.W * rows
	var s float64
	for y := range rows {
		for _, v := range g.Pix[y*g.Stride : y*g.Stride+g.W] {
			s += float64(v)
		}
	}
	mean := s / float64(n)
	var ss float64
	for y := range rows {
		for _, v := range g.Pix[y*g.Stride : y*g.Stride+g.W] {
			d := float64(v) - mean
			ss += d * d
		}
	}
	b := ss / float64(g.W*g.H)
	return b >= 4*MinContrast*MinContrast && !math.IsInf(b, 0)
}

// CheckPair checks that a reference and a deformed image can be
// correlated with square subsets of side subset px: both present, the
// same size, each at least one subset wide and high, and each with
// contrast (subset ≤ 0 skips the subset check). All problems are returned together (errors.Join); each names
// the image, what is wrong and what would work, and wraps ErrSizeMismatch,
// ErrTooSmall or ErrNoContrast.
func CheckPair(ref, def *Gray, subset int) error {
	var errs []error
	for _, im := range []struct {
		name string
		g    *Gray
	}{{"reference", ref}, {"deformed", def}} {
		if im.g == nil || im.g.W*im.g.H == 0 {
			errs = append(errs, fmt.Errorf("%s image: %w: it is empty", im.name, ErrTooSmall))
			continue
		}
		if subset > 0 && (im.g.W < subset || im.g.H < subset) {
			errs = append(errs, fmt.Errorf("%s image: %w: %d×%d px is smaller than one %d×%d px subset; "+
				"use a subset of at most %d px or a larger image",
				im.name, ErrTooSmall, im.g.W, im.g.H, subset, subset, min(im.g.W, im.g.H)))
		}
		if err := CheckContrast(im.g); err != nil {
			errs = append(errs, fmt.Errorf("%s image: %w", im.name, err))
		}
	}
	if ref != nil && def != nil && (ref.W != def.W || ref.H != def.H) {
		errs = append(errs, fmt.Errorf("%w: reference is %d×%d px, deformed is %d×%d px; "+
			"both images must come from the same camera at the same resolution and crop",
			ErrSizeMismatch, ref.W, ref.H, def.W, def.H))
	}
	return errors.Join(errs...)
}

package correlate

import (
	"errors"
	"fmt"
	"math"

	"github.com/mottledic/mottle/pkg/roi"
	"github.com/mottledic/mottle/pkg/spline"
)

// Default option values, used by Defaults and wherever an Options field is zero.
const (
	DefaultSubset  = 31
	DefaultStep    = 8
	DefaultSearch  = 40
	DefaultMinZNCC = 0.8
	DefaultMaxIter = 50
	DefaultTol     = 1e-4
)

// Limits on option values, chosen to reject mistakes rather than to
// restrict sensible use.
const (
	MinSubset  = 7
	MaxSubset  = 401
	MaxSearch  = 2000
	MaxMaxIter = 1000
)

// Options controls a correlation run. The zero value of every field selects
// its documented default, so Options{} is valid.
type Options struct {
	// Subset is the side of the square subset in pixels, odd, at least
	// MinSubset. Default 31.
	Subset int
	// Step is the grid spacing in pixels. Default 8.
	Step int
	// Shape is the shape function: First (6 parameters) or Second (12).
	// Default First.
	Shape Shape
	// Interp is the B-spline degree used to interpolate the deformed
	// image: spline.Cubic or spline.Quintic. Default Cubic.
	Interp spline.Order
	// Prefilter is the σ in pixels of a Gaussian applied to both images
	// before correlation (reduces interpolation bias); 0 = off.
	Prefilter float64
	// Mask is the region of interest; nil = the whole image. A grid point
	// is computed only if its whole subset is inside the mask.
	Mask *roi.Mask
	// Seeds are reference positions (x, y) where the integer search starts;
	// each snaps to the nearest grid point whose subset fits. Empty = one
	// automatic seed: a well-textured grid point near the ROI centroid.
	Seeds [][2]int
	// Search is the integer search radius in pixels around each seed: the
	// largest displacement a seed can find. Default 40.
	Search int
	// MinZNCC rejects converged matches below it. Default 0.8; a negative
	// value accepts every converged point.
	MinZNCC float64
	// MaxIter caps the IC-GN iterations per attempt. Default 50.
	MaxIter int
	// Tol is the convergence threshold on the size of the IC-GN update, in
	// pixels: the largest displacement change the update causes over the
	// subset (translation plus gradient terms times the half-width).
	// Default 1e-4.
	Tol float64
	// Threads is the number of goroutines; 0 = runtime.GOMAXPROCS(0).
	// Results do not depend on it.
	Threads int
	// Noise is the known image noise σ in grey levels (for instance from a
	// static pair, see EstimateNoise); 0 = estimate it from the residuals.
	Noise float64
	// Start, if not nil, holds a starting guess for every grid point: the
	// Points of an earlier Result on the same grid (same reference image,
	// Subset, Step and Mask). Points whose Start has Status OK start from
	// Start[i].P instead of the search; the rest are reached by propagation.
	Start []Point
	// Progress, if not nil, is called from the calling goroutine with the
	// number of grid points finished and the number to do.
	Progress func(done, total int)
}

// Defaults returns the Options with every default filled in.
func Defaults() Options {
	var o Options
	o.fill()
	return o
}

// fill replaces zero fields by their defaults.
func (o *Options) fill() {
	if o.Subset == 0 {
		o.Subset = DefaultSubset
	}
	if o.Step == 0 {
		o.Step = DefaultStep
	}
	if o.Shape == 0 {
		o.Shape = First
	}
	if o.Interp == 0 {
		o.Interp = spline.Cubic
	}
	if o.Search == 0 {
		o.Search = DefaultSearch
	}
	if o.MinZNCC == 0 {
		o.MinZNCC = DefaultMinZNCC
	}
	if o.MaxIter == 0 {
		o.MaxIter = DefaultMaxIter
	}
	if o.Tol == 0 {
		o.Tol = DefaultTol
	}
}

// Validate reports every problem with the options at once (zero fields
// count as their defaults). Checks that need the images, such as seed
// positions and the mask size, are made by Run.
func (o Options) Validate() error {
	o.fill()
	var errs []error
	bad := func(format string, a ...any) { errs = append(errs, fmt.Errorf("correlate: "+format, a...)) }
	if o.Subset < MinSubset || o.Subset > MaxSubset || o.Subset%2 == 0 {
		bad("subset %d px: want an odd number from %d to %d (31 is typical)", o.Subset, MinSubset, MaxSubset)
	}
	if o.Step < 1 || o.Step > 1000 {
		bad("step %d px: want 1 to 1000 (8 is typical)", o.Step)
	}
	if o.Shape != First && o.Shape != Second {
		bad("shape %d: want First (1) or Second (2)", int(o.Shape))
	}
	if o.Interp != spline.Cubic && o.Interp != spline.Quintic {
		bad("interpolation order %d: want 3 (cubic) or 5 (quintic)", int(o.Interp))
	}
	if !(o.Prefilter >= 0 && o.Prefilter <= spline.MaxSmoothSigma) {
		bad("prefilter σ %v px: want 0 (off) to %d", o.Prefilter, spline.MaxSmoothSigma)
	}
	if o.Search < 0 || o.Search > MaxSearch {
		bad("search radius %d px: want 1 to %d", o.Search, MaxSearch)
	}
	if !(o.MinZNCC <= 1) || math.IsNaN(o.MinZNCC) {
		bad("minimum ZNCC %v: want at most 1 (0.8 is typical; negative accepts all)", o.MinZNCC)
	}
	if o.MaxIter < 1 || o.MaxIter > MaxMaxIter {
		bad("iteration cap %d: want 1 to %d", o.MaxIter, MaxMaxIter)
	}
	if !(o.Tol > 0 && o.Tol < 1) {
		bad("tolerance %v px: want 0 < tol < 1 (1e-4 is typical)", o.Tol)
	}
	if o.Threads < 0 {
		bad("threads %d: want 0 (all cores) or more", o.Threads)
	}
	if !(o.Noise >= 0) || math.IsInf(o.Noise, 0) {
		bad("noise σ %v: want 0 (estimate) or a positive number of grey levels", o.Noise)
	}
	return errors.Join(errs...)
}

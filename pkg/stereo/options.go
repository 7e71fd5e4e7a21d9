package stereo

import (
	"errors"
	"fmt"
	"math"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/correlate"
)

// Options tune Match and Track. The zero value of a field means its
// default.
type Options struct {
	// Correlate are the subset options of every match (Subset, Step, Mask
	// of the left reference image, Search, MinZNCC, Interp, Noise,
	// Threads); Shape defaults to correlate.Second here, which follows the
	// perspective change between the two cameras. Seeds, Start and
	// Progress are not used.
	Correlate correlate.Options
	// MinDepth and MaxDepth bound the epipolar search along each left ray,
	// mm from the left camera. Default: half and twice the depth at which
	// the two optical axes pass closest.
	MinDepth, MaxDepth float64
	// SeedSpacing is the spacing in px of the seed points that are found
	// by search (along the epipolar line for the left–right match, by the
	// integer search of correlate over time); the other points start from
	// the nearest seed. Default 64.
	SeedSpacing int
	// MaxGap is the largest optimal correction of a triangulated pair, px
	// (see Point3.Gap); points beyond it get RaysApart. Default 1.
	MaxGap float64
}

func (o Options) withDefaults(rig *calib.Rig) Options {
	if o.Correlate.Shape == 0 {
		o.Correlate.Shape = correlate.Second
	}
	if o.SeedSpacing == 0 {
		o.SeedSpacing = 64
	}
	if o.MaxGap == 0 {
		o.MaxGap = 1
	}
	if o.MinDepth == 0 || o.MaxDepth == 0 {
		z := axesDepth(rig)
		if o.MinDepth == 0 {
			o.MinDepth = z / 2
		}
		if o.MaxDepth == 0 {
			o.MaxDepth = 2 * z
		}
	}
	return o
}

// Validate reports every problem of o at once.
func (o Options) Validate() error {
	var errs []error
	if err := o.Correlate.Validate(); err != nil {
		errs = append(errs, err)
	}
	if o.MinDepth < 0 || o.MaxDepth < 0 || (o.MaxDepth > 0 && o.MinDepth >= o.MaxDepth) {
		errs = append(errs, fmt.Errorf("stereo: depth range %g–%g mm: want 0 < min < max (0 for the default)", o.MinDepth, o.MaxDepth))
	}
	if o.SeedSpacing < 0 || o.SeedSpacing > 10000 {
		errs = append(errs, fmt.Errorf("stereo: seed spacing %d px: want 1–10000 (0 for the default 64)", o.SeedSpacing))
	}
	if o.MaxGap < 0 || math.IsNaN(o.MaxGap) {
		errs = append(errs, fmt.Errorf("stereo: max gap %g px: want a positive number (0 for the default 1)", o.MaxGap))
	}
	return errors.Join(errs...)
}

// axesDepth returns the left-frame depth of the point where the two
// optical axes pass closest (the working distance of a converging rig);
// for parallel axes, 10 baselines.
func axesDepth(r *calib.Rig) float64 {
	// Left axis: s·(0,0,1). Right axis in the left frame: C + t·d with
	// C = −Rᵀ T and d = Rᵀ e3.
	Rt := transpose(r.R)
	C := mulv(Rt, r.T)
	for i := range C {
		C[i] = -C[i]
	}
	d := [3]float64{Rt[0][2], Rt[1][2], Rt[2][2]}
	// Minimise |s e3 − C − t d|²: [1 −d3; −d3 |d|²][s t] = [C3, −C·d].
	b := d[2]
	den := 1 - b*b
	if den < 1e-9 {
		return 10 * r.Baseline()
	}
	cd := C[0]*d[0] + C[1]*d[1] + C[2]*d[2]
	s := (C[2] - b*cd) / den
	if !(s > 0) {
		return 10 * r.Baseline()
	}
	return s
}

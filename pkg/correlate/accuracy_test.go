package correlate

import (
	"context"
	"testing"

	"github.com/mottledic/mottle/pkg/synth"
)

// Homogeneous deformation plus translation, 16-bit and noise-free: against
// the renderer's exact truth, the displacement RMS error must be ≤ 0.002 px
// and each subset's F within 2e-4 (targets of the project's accuracy issue;
// sub-0.01 px accuracy on noise-free images is the common experience of
// IC-GN, e.g. Pan, Li & Tong 2013, Exp. Mech. 53:1277).
func TestHomogeneousAffine(t *testing.T) {
	m := synth.Affine{F: [2][2]float64{{1.01, 0.004}, {-0.003, 0.995}}, CX: 128, CY: 128, U: 3.3, V: -7.6}
	ref, def := pair(t, m, 256, 256, 16, 0, 1)
	for _, shape := range []Shape{First, Second} {
		res, err := Run(context.Background(), ref, def, Options{Subset: 31, Step: 8, Shape: shape})
		if err != nil {
			t.Fatal(err)
		}
		rms, maxF, n := truthErrors(res, m)
		t.Logf("shape %d: %d points OK of %d, displacement RMS error %.5f px, max |ΔF| %.2g, mean iterations %.2f",
			shape, n, res.Stats.Total, rms, maxF, res.Stats.MeanIter)
		// Points whose deformed subset leaves the image (v = −7.6 px at the top) are rejected.
		if n < res.Stats.Total*85/100 {
			t.Errorf("shape %d: only %d of %d points accepted", shape, n, res.Stats.Total)
		}
		if rms > 0.002 {
			t.Errorf("shape %d: displacement RMS error %.5f px, want ≤ 0.002", shape, rms)
		}
		if maxF > 2e-4 {
			t.Errorf("shape %d: max subset F error %.2g, want ≤ 2e-4", shape, maxF)
		}
	}
}

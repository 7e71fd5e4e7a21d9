//go:build goexperiment.simd && amd64

package correlate

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/mottledic/mottle/pkg/synth"
)

// The vector form of the prefilter's predicted variances gives
// smoothedVars' values to rounding, for both shape functions, kernels of
// 7 and 13 taps and sides 5, 1, 7 and 1 beyond a multiple of eight (the
// widths with the kernel, side + 2r, are odd: every row's last group of
// eight overlaps the one before), at random grid points and for random
// combinations c (the rows of H⁻¹ in a run).
func TestVectorSmoothedVarsMatchPortable(t *testing.T) {
	if !vectorPass {
		t.Skip("this CPU has no AVX-512 and FMA: the vector form is not used")
	}
	m := synth.Affine{F: [2][2]float64{{1.006, 0.003}, {-0.002, 0.996}}, CX: 120, CY: 110, U: 2.7, V: -1.4}
	ref, def := pair(t, m, 240, 220, 8, 1, 11)
	rng := rand.New(rand.NewPCG(11, 12))
	var worst float64
	var tested int
	for _, shape := range []Shape{First, Second} {
		for _, sigma := range []float64{0.8, 1.9} {
			for _, subset := range []int{21, 25, 31, 33} {
				r, err := newRun(context.Background(), ref, def, Options{Subset: subset, Shape: shape, Prefilter: sigma, Threads: 1}, tuning{})
				if err != nil {
					t.Fatal(err)
				}
				s := r.solvers[0]
				for trial := 0; trial < 20; trial++ {
					xc, yc := float64(30+rng.IntN(180)), float64(30+rng.IntN(160))
					if s.prepare(xc, yc) != OK {
						continue
					}
					var cu, cv [12]float64
					for q := 0; q < s.np; q++ {
						cu[q], cv[q] = rng.NormFloat64(), rng.NormFloat64()
					}
					au, av := s.smoothedVars(&cu, &cv)
					bu, bv := s.smoothedVarsV(&cu, &cv)
					// Sums of about (side + 2r)² squares of terms that are
					// themselves sums of some 10 + 2·13 products: the two
					// orders of evaluation differ by ~1e-15 relative.
					for _, d := range [][2]float64{{au, bu}, {av, bv}} {
						rel := math.Abs(d[0]-d[1]) / d[0]
						worst = math.Max(worst, rel)
						if !(rel <= 1e-12) {
							t.Fatalf("shape %v, σ %v, subset %d at (%v, %v): smoothedVars %v, vector form %v (relative difference %.2g)", shape, sigma, subset, xc, yc, d[0], d[1], rel)
						}
					}
					tested++
				}
				r.stop()
			}
		}
	}
	t.Logf("%d subsets, largest relative difference %.2g", tested, worst)
	if tested < 100 {
		t.Errorf("only %d subsets prepared", tested)
	}
}

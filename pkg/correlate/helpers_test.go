package correlate

import (
	"math"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// pair renders a reference and a deformed image of one Boolean-model
// speckle pattern with the project's exact renderer (pkg/synth).
//
// The speckles are Gaussian spots of 5 px full width at half maximum, a
// well-sampled pattern in line with good practice (iDICs 2018 guide: 3–5 px
// speckles); hard-edged discs alias and would measure the pattern rather
// than the engine.
func pair(t testing.TB, m synth.Motion, w, h, bits int, noise float64, seed int64) (ref, def *imageio.Gray) {
	t.Helper()
	ref, def, err := synth.Pair(synth.PatternOptions{Diameter: 5, Kind: synth.Gaussian, Seed: seed}, m,
		synth.RenderOptions{W: w, H: h, Bits: bits, Noise: noise, Seed: seed})
	if err != nil {
		t.Fatal(err)
	}
	return ref, def
}

// errors of accepted points against the motion's exact displacement and
// gradient: RMS displacement error, largest gradient error, accepted count.
func truthErrors(res *Result, m synth.Motion) (rmsU, maxF float64, n int) {
	var s float64
	for _, p := range res.Points {
		if p.Status != OK {
			continue
		}
		x, y := m.Map(p.X, p.Y)
		du, dv := p.P[U]-(x-p.X), p.P[V]-(y-p.Y)
		s += du*du + dv*dv
		F := m.Gradient(p.X, p.Y)
		for _, d := range []float64{p.P[Ux] + 1 - F[0][0], p.P[Uy] - F[0][1], p.P[Vx] - F[1][0], p.P[Vy] + 1 - F[1][1]} {
			maxF = math.Max(maxF, math.Abs(d))
		}
		n++
	}
	if n > 0 {
		rmsU = math.Sqrt(s / float64(n))
	}
	return rmsU, maxF, n
}

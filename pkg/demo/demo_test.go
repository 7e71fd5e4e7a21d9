package demo

import (
	"context"
	"math"
	"testing"

	"github.com/mottledic/mottle/pkg/analysis"
)

// TestDemoAgainstKirsch analyses the built-in demo and compares it with
// its exact truth: the Kirsch plate-with-a-hole field (Kirsch 1898; stresses
// as in Timoshenko & Goodier, Theory of Elasticity), rendered exactly by
// pkg/synth. Bounds: the displacement error is set by the camera noise
// (σ = 1.5 grey levels on 8-bit images: the predicted std of u is about
// 0.003 px, Wang et al. 2007), so an RMS error of 0.01 px leaves room for
// interpolation bias; the strain error against the truth passed through the
// same strain window is the correlation's own, noise over a 63 px gauge,
// bounded at 3e-4. The measured peak on the ligament must show the
// concentration: above 1.4× the remote strain S/E.
func TestDemoAgainstKirsch(t *testing.T) {
	ctx := context.Background()
	s := Default()
	ref, def, err := s.Render()
	if err != nil {
		t.Fatal(err)
	}
	f, err := analysis.Run(ctx, ref, def, s.Params(), nil)
	if err != nil {
		t.Fatal(err)
	}
	c, err := s.Compare(ctx, f)
	if err != nil {
		t.Fatal(err)
	}
	if c.RMSU > 0.01 || c.RMSV > 0.01 {
		t.Errorf("displacement RMS error u %.4f px, v %.4f px; want ≤ 0.01", c.RMSU, c.RMSV)
	}
	for i, name := range []string{"E11", "E22", "E12"} {
		if c.RMSWindowed[i] > 3e-4 {
			t.Errorf("%s RMS error against the windowed truth %.2e; want ≤ 3e-4", name, c.RMSWindowed[i])
		}
	}
	if frac := float64(c.Valid) / float64(c.Points); frac < 0.75 {
		t.Errorf("only %.0f %% of the points are valid", 100*frac)
	}
	var peak Row
	for _, r := range c.Rows {
		if r.Name == "peak E11 on the ligament" {
			peak = r
		}
	}
	if remote := s.Stress / s.E; !(peak.Measured > 1.4*remote) {
		t.Errorf("peak E11 on the ligament %.5f, want a concentration above 1.4·S/E = %.5f", peak.Measured, 1.4*remote)
	}
	if math.Abs(peak.Measured-peak.Windowed) > 1e-3 {
		t.Errorf("peak E11 %.5f, windowed truth %.5f", peak.Measured, peak.Windowed)
	}
}

package demo

import (
	"context"
	"math"
	"testing"

	"github.com/mottledic/mottle/internal/figures"
	"github.com/mottledic/mottle/pkg/analysis"
)

// TestDemoAgainstKirsch analyses the built-in demo and compares it with
// its exact truth: the Kirsch plate-with-a-hole field (Kirsch 1898; stresses
// as in Timoshenko & Goodier, Theory of Elasticity; the displacement form is
// from memory and checked against those stresses by pkg/synth TestKirsch),
// rendered exactly by pkg/synth. Bounds: the displacement error is set by the camera noise
// (σ = 1.5 grey levels on 8-bit images: the predicted std of u is about
// 0.003 px, Wang et al. 2007) plus interpolation bias; the strain error
// against the truth seen through the same subset and strain window is the
// correlation's own, noise over a 63 px gauge (VSG = (window − 1)·step +
// subset, form from memory). Both are bounded at about 1.5× the values
// measured on the demo when the bounds were set (internal/figures; the
// project's first targets were 0.01 px and 3e-4). The measured peak on the
// ligament must show the concentration: above 1.4× the remote strain S/E.
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
	// The figures README quotes for the demo, each bounded at about 1.5×
	// its value on the demo's own images (internal/figures).
	figures.Check(t, "demo/u", c.RMSU)
	figures.Check(t, "demo/v", c.RMSV)
	for i, name := range []string{"E11", "E22", "E12"} {
		figures.Check(t, "demo/"+name, c.RMSWindowed[i])
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
	// Along the ligament (θ = 90°) the Kirsch concentration must be found
	// to within the smoothing that the subset and the strain window imply:
	// the measurement must agree with the exact field seen through them
	// (its subset mean, then the same plane fit) to within the noise, taken
	// as the larger of 3e-4 and 4 predicted std of E11 (one-sided windows at
	// the ROI edge have several times the noise of full ones); and its
	// distance to the exact point value may exceed that smoothing only by
	// the same noise bound.
	if len(c.Ligament) < 10 {
		t.Fatalf("only %d ligament points", len(c.Ligament))
	}
	for _, lp := range c.Ligament {
		tol := math.Max(3e-4, 4*lp.Std)
		if d := math.Abs(lp.Measured - lp.Windowed); d > tol {
			t.Errorf("ligament r = %.1f px: E11 %.5f, ideal through subset and window %.5f (|Δ| %.1e > %.1e)", lp.R, lp.Measured, lp.Windowed, d, tol)
		}
		if d, smooth := math.Abs(lp.Measured-lp.Truth), math.Abs(lp.Windowed-lp.Truth); d > smooth+tol {
			t.Errorf("ligament r = %.1f px: E11 %.5f, Kirsch %.5f: off by %.1e, more than the smoothing %.1e plus %.1e", lp.R, lp.Measured, lp.Truth, d, smooth, tol)
		}
	}
}

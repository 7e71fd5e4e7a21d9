package correlate_test

import (
	"context"
	"fmt"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/synth"
)

// Analyse a rendered pair: a 1.5 px translation with 0.5 % stretch along x.
// Points near the right-hand edge are rejected because their deformed
// subsets leave the image. At X = 97 the exact displacement is
// u = 1.5 + 0.005·(97 − 96) = 1.505 px and ∂u/∂X = 0.005.
func ExampleRun() {
	m := synth.Affine{F: [2][2]float64{{1.005, 0}, {0, 1}}, CX: 96, CY: 96, U: 1.5}
	ref, def, err := synth.Pair(synth.PatternOptions{Diameter: 5, Kind: synth.Gaussian, Seed: 1}, m,
		synth.RenderOptions{W: 192, H: 192, Bits: 16})
	if err != nil {
		panic(err)
	}
	res, err := correlate.Run(context.Background(), ref, def, correlate.Options{Subset: 31, Step: 16})
	if err != nil {
		panic(err)
	}
	p := res.Points[res.Grid.Index(res.Grid.Nx/2, res.Grid.Ny/2)]
	fmt.Printf("%d of %d points ok, %d left the image, %d diverged\n", res.Stats.OK, res.Stats.Total, res.Stats.LeftImage, res.Stats.Diverged)
	fmt.Printf("at (%.0f, %.0f): u = %.2f px, du/dx = %.4f, status %v\n", p.X, p.Y, p.P[correlate.U], p.P[correlate.Ux], p.Status)
	// Output:
	// 93 of 100 points ok, 7 left the image, 0 diverged
	// at (97, 97): u = 1.51 px, du/dx = 0.0050, status ok
}

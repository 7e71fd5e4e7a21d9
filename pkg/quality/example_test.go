package quality_test

import (
	"context"
	"fmt"

	"github.com/mottledic/mottle/pkg/quality"
	"github.com/mottledic/mottle/pkg/synth"
)

// Check an over-exposed image: the warning says what to change at the bench.
func ExampleAssess() {
	g, _, err := synth.Pair(synth.PatternOptions{Seed: 1}, nil, synth.RenderOptions{W: 128, H: 128, Gain: 1.5 * 255})
	if err != nil {
		panic(err)
	}
	rep, err := quality.Assess(g, nil, "reference", nil, quality.Thresholds{})
	if err != nil {
		panic(err)
	}
	for _, w := range rep.Warnings {
		fmt.Println(w.Code, "—", w.Action)
	}
	// Output:
	// saturated — shorten the exposure, close the aperture or dim the lights, and remove glare (polariser, diffuse light) until no pixel saturates
}

// Choose the subset for a displacement std of 0.01 px, the noise measured
// from a static pair.
func ExampleChooseSubset() {
	po := synth.PatternOptions{Seed: 2, Contrast: 0.2}
	a, b, err := synth.Pair(po, nil, synth.RenderOptions{W: 192, H: 192, Noise: 1})
	if err != nil {
		panic(err)
	}
	sigma, err := quality.NoiseFromPair(a, b, nil)
	if err != nil {
		panic(err)
	}
	c, err := quality.ChooseSubset(context.Background(), a, quality.SubsetOptions{Target: 0.01, Noise: sigma})
	if err != nil {
		panic(err)
	}
	fmt.Printf("noise %.2f grey levels: subset %d px, predicted %.4f px at %.0f %% of the points\n",
		sigma, c.Subset, c.Predicted, 100*c.Fraction)
	// Output:
	// noise 1.04 grey levels: subset 15 px, predicted 0.0086 px at 95 % of the points
}

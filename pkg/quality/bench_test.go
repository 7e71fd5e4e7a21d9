package quality_test

import (
	"context"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
	"github.com/mottledic/mottle/pkg/synth"
)

func benchImage(b *testing.B) *imageio.Gray {
	ref, _, err := synth.Pair(synth.PatternOptions{Seed: 1}, nil, synth.RenderOptions{W: 1024, H: 1024, Noise: 1})
	if err != nil {
		b.Fatal(err)
	}
	return ref
}

// BenchmarkStats1024 is the baseline: imageio.Stats, one plain pass over
// the 1024² image. Report the others as ratios to it.
func BenchmarkStats1024(b *testing.B) {
	g := benchImage(b)
	for b.Loop() {
		imageio.Stats(g)
	}
}

// BenchmarkMeasure1024 measures every quality measure of a 1024² image.
func BenchmarkMeasure1024(b *testing.B) {
	g := benchImage(b)
	for b.Loop() {
		if _, err := quality.Measure(g, nil); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkChooseSubset1024 chooses the subset for 0.01 px on a 1024²
// image: 7–101 px on an 8 px grid (15,625 points × 48 sizes).
func BenchmarkChooseSubset1024(b *testing.B) {
	g := benchImage(b)
	for b.Loop() {
		if _, err := quality.ChooseSubset(context.Background(), g, quality.SubsetOptions{Target: 0.01, Noise: 1}); err != nil {
			b.Fatal(err)
		}
	}
}

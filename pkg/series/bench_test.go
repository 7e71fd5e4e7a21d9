package series

import (
	"context"
	"encoding/json"
	"testing"

	"github.com/mottledic/mottle/pkg/synth"
)

// benchTracker measures Add on 256×256 frames of a 1 % stretch with the
// series defaults (subset 21, step 8: about 800 points).
func benchTracker(b *testing.B, mode string) {
	var ms []synth.Motion
	for _, e := range []float64{0.005, 0.01} {
		ms = append(ms, synth.Affine{F: [2][2]float64{{1 + e, 0}, {0, 1 - 0.3*e}}, CX: 128, CY: 128})
	}
	ref, imgs := renderFrames(b, 256, 256, 4, ms, 0)
	p := Defaults()
	p.Analysis.Subset, p.Analysis.Step = 21, 8
	p.Incremental = mode
	b.ResetTimer()
	for range b.N {
		b.StopTimer()
		tr, err := New(ref, FrameMeta{}, p)
		if err != nil {
			b.Fatal(err)
		}
		if _, err := tr.Add(context.Background(), imgs[0], FrameMeta{}); err != nil {
			b.Fatal(err)
		}
		b.StartTimer()
		if _, err := tr.Add(context.Background(), imgs[1], FrameMeta{}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "frames/s")
}

func BenchmarkAddDirect(b *testing.B)      { benchTracker(b, IncrementalNever) }
func BenchmarkAddIncremental(b *testing.B) { benchTracker(b, IncrementalAlways) }

// BenchmarkGuessDecode compares reading a frame's guess from the state's
// JSON (256×256 px, about 800 points, two frames of history) by decoding
// the whole state and by SolutionOfState.
func BenchmarkGuessDecode(b *testing.B) {
	var ms []synth.Motion
	for _, e := range []float64{0.005, 0.01} {
		ms = append(ms, synth.Affine{F: [2][2]float64{{1 + e, 0}, {0, 1 - 0.3*e}}, CX: 128, CY: 128})
	}
	ref, imgs := renderFrames(b, 256, 256, 4, ms, 0)
	p := Defaults()
	p.Analysis.Subset, p.Analysis.Step = 21, 8
	tr, err := New(ref, FrameMeta{}, p)
	if err != nil {
		b.Fatal(err)
	}
	for _, im := range imgs {
		if _, err := tr.Add(context.Background(), im, FrameMeta{}); err != nil {
			b.Fatal(err)
		}
	}
	js, err := tr.StateJSON()
	if err != nil {
		b.Fatal(err)
	}
	b.Run("state", func(b *testing.B) {
		for range b.N {
			var st State
			if err := json.Unmarshal(js, &st); err != nil || st.Solution() == nil {
				b.Fatal(err)
			}
		}
	})
	b.Run("guess", func(b *testing.B) {
		for range b.N {
			if g, err := SolutionOfState(js); err != nil || g == nil {
				b.Fatal(err)
			}
		}
	})
}

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

// BenchmarkSolutionCodec encodes and decodes the solution of a 512×512
// frame at step 8 (3 600 points, solved values of a stretch) in the JSON
// form of earlier versions and in the binary form the runner stores, in
// the same run. Run with
//
//	go test -run '^$' -bench SolutionCodec ./pkg/series
func BenchmarkSolutionCodec(b *testing.B) {
	const n = 60
	sol := &Solution{Grid: lattice{X0: 24, Y0: 24, Step: 8, Nx: n, Ny: n}}
	for k := range n * n {
		x, y := float64(24+8*(k%n)), float64(24+8*(k/n))
		sol.Points = append(sol.Points, PointState{X: x*1.0123456789 + 0.3, Y: y*0.99654321 - 0.1,
			F: [4]float64{1.0123456789, 1.3e-5, -2.1e-5, 0.99654321}, ZNCC: 0.99812345, StdU: 0.0123456, StdV: 0.0134567, Valid: true})
	}
	for _, c := range []struct {
		name string
		enc  func() ([]byte, error)
	}{
		{"json", func() ([]byte, error) { return json.Marshal(sol) }},
		{"binary", sol.MarshalBinary},
	} {
		b.Run(c.name, func(b *testing.B) {
			var size int
			for range b.N {
				data, err := c.enc()
				if err != nil {
					b.Fatal(err)
				}
				if _, err := DecodeSolution(data); err != nil {
					b.Fatal(err)
				}
				size = len(data)
			}
			b.ReportMetric(float64(size), "bytes")
		})
	}
}

// BenchmarkStateCodec encodes and decodes the state a service worker
// stores after each frame of a 512×512 series at step 8 (3 600 points,
// three frames of history, a tracker's real values; the curve padded to
// the 60 rows of frame 59 of BenchmarkClusterSeries), in the JSON form
// of earlier versions and in the binary form, in the same run. Run with
//
//	go test -run '^$' -bench StateCodec ./pkg/series
func BenchmarkStateCodec(b *testing.B) {
	var ms []synth.Motion
	for _, e := range []float64{0.002, 0.004, 0.006} {
		ms = append(ms, synth.Affine{F: [2][2]float64{{1 + e, 0}, {0, 1 - 0.3*e}}, CX: 256, CY: 256})
	}
	ref, imgs := renderFrames(b, 512, 512, 4, ms, 0)
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
	for len(tr.st.Curve) < 60 {
		r := tr.st.Curve[len(tr.st.Curve)-1]
		r.Index++
		tr.st.Curve = append(tr.st.Curve, r)
	}
	for _, c := range []struct {
		name string
		enc  func() ([]byte, error)
	}{
		{"json", tr.StateJSON},
		{"binary", tr.StateBinary},
	} {
		b.Run(c.name, func(b *testing.B) {
			var size int
			for range b.N {
				data, err := c.enc()
				if err != nil {
					b.Fatal(err)
				}
				if _, err := DecodeState(data); err != nil {
					b.Fatal(err)
				}
				size = len(data)
			}
			b.ReportMetric(float64(size), "bytes")
		})
	}
}

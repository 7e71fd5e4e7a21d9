package synth

import (
	"context"
	"errors"
	"math"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
)

// TestLoadSeries: frame i of a load ramp carries the motion scaled by its
// factor (linear elasticity: displacement proportional to load, Hooke's
// law), with its time stamp and load.
func TestLoadSeries(t *testing.T) {
	h := Hole{E: 70000, Nu: 0.3, Radius: 15, Stress: 200, MMPerPx: 0.01, CX: 40, CY: 40}
	frames, err := LoadSeries(h, Ramp(4), 0.5, 1000)
	if err != nil {
		t.Fatal(err)
	}
	if len(frames) != 5 {
		t.Fatalf("%d frames, want 5", len(frames))
	}
	full := At(h, 70, 20)
	for i, f := range frames {
		want := float64(i) / 4
		if f.Factor != want || f.Load != 1000*want || f.Time != 0.5*float64(i) {
			t.Errorf("frame %d: %+v", i, f)
		}
		got := At(f.Motion, 70, 20)
		if math.Abs(got.U-want*full.U) > 1e-12 || math.Abs(got.V-want*full.V) > 1e-12 {
			t.Errorf("frame %d: u = (%g, %g), want %g × (%g, %g)", i, got.U, got.V, want, full.U, full.V)
		}
	}
	if _, err := LoadSeries(h, nil, 1, 1); err == nil {
		t.Error("empty factors: no error")
	}
	if _, err := LoadSeries(unscalable{h}, Ramp(2), 1, 1); err == nil {
		t.Error("unscalable motion: no error")
	}
}

// TestStaticSeries: frames of a static series differ only by noise, whose
// frame-to-frame difference has standard deviation √2·σ (difference of two
// independent normal variates).
func TestStaticSeries(t *testing.T) {
	const sigma = 3
	frames := StaticSeries(nil, 3, 1, 0)
	p, err := NewPattern(PatternOptions{Seed: 2, Bounds: ImageRect(96, 96, 10)})
	if err != nil {
		t.Fatal(err)
	}
	var imgs []*imageio.Gray
	err = RenderSeries(context.Background(), p, frames, RenderOptions{W: 96, H: 96, Noise: sigma, Float: true},
		func(f Frame, g *imageio.Gray, r Report) error {
			imgs = append(imgs, g)
			return nil
		})
	if err != nil {
		t.Fatal(err)
	}
	if frames[0].NoiseSeed == frames[1].NoiseSeed {
		t.Error("frames share a noise seed")
	}
	var ss float64
	for i := range imgs[0].Pix {
		d := float64(imgs[0].Pix[i] - imgs[1].Pix[i])
		ss += d * d
	}
	got := math.Sqrt(ss / float64(len(imgs[0].Pix)))
	if math.Abs(got/(math.Sqrt2*sigma)-1) > 0.05 {
		t.Errorf("frame difference σ = %.3f, want %.3f", got, math.Sqrt2*sigma)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if err := RenderSeries(ctx, p, frames, RenderOptions{W: 8, H: 8}, nil); !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled: %v", err)
	}
}

// TestFailedInverseReported: a quadratic field that folds over (det F < 0
// beyond x ≈ 40) has no inverse for part of the image; Render counts and
// lists those pixels and Pair refuses the pair.
func TestFailedInverseReported(t *testing.T) {
	fold := Quadratic{P: [12]float64{6: -0.05}, CX: 20, CY: 0} // u = −0.025 dX², ∂x/∂X = 1 − 0.05 dX
	p, err := NewPattern(PatternOptions{Seed: 1, Bounds: ImageRect(64, 16, 40)})
	if err != nil {
		t.Fatal(err)
	}
	_, rep, err := Render(p, fold, RenderOptions{W: 64, H: 16})
	if err != nil {
		t.Fatal(err)
	}
	if rep.Failed == 0 || len(rep.FailedPixels) == 0 {
		t.Fatalf("report %+v: want failed samples", rep)
	}
	for _, px := range rep.FailedPixels {
		if px[0] < 30 {
			t.Errorf("pixel %v failed, but the map is one-to-one there", px)
		}
	}
	if _, _, err := Pair(PatternOptions{Seed: 1}, fold, RenderOptions{W: 64, H: 16}); !errors.Is(err, ErrNoInverse) {
		t.Errorf("Pair: %v, want ErrNoInverse", err)
	}
}

// unscalable hides the Scale method of a motion.
type unscalable struct{ Motion }

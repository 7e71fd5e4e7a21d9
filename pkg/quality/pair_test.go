package quality_test

import (
	"context"
	"math"
	"reflect"
	"slices"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
	"github.com/mottledic/mottle/pkg/synth"
)

// AssessPair names each image and compares the deformed one with the
// reference: a deformed image 40 % darker warns of brightness and contrast.
func TestAssessPair(t *testing.T) {
	po := synth.PatternOptions{Seed: 3}
	ref := render(t, po, synth.RenderOptions{}, 128)
	def := render(t, po, synth.RenderOptions{Gain: 0.6 * 255}, 128)
	rs, err := quality.AssessPair(ref, def, nil, quality.Thresholds{})
	if err != nil {
		t.Fatal(err)
	}
	if len(rs) != 2 || rs[0].Image != "reference" || rs[1].Image != "deformed" || rs[0].Change != nil || rs[1].Change == nil {
		t.Fatalf("reports %+v", rs)
	}
	ws := quality.Warnings(rs)
	if !slices.Contains(codes(ws), quality.BrightnessChange) || len(rs[0].Warnings) != 0 {
		t.Errorf("warnings %v (reference %v)", codes(ws), codes(rs[0].Warnings))
	}
	if _, err := quality.AssessPair(ref, nil, nil, quality.Thresholds{}); err == nil {
		t.Error("no deformed image: no error")
	}
}

// Recommend: the subset for a target from one image, with the noise
// estimated from the image (about 10 % high, so a subset at most one or
// two sizes larger than with the true σ), the VSG by its definition, and an
// unreachable target reported rather than failed.
// AssessPairWith given the reference's measures from an earlier call
// reports exactly what AssessPair does, for a usable reference and for a
// uniform one (no speckle size, NaN in its measures), and returns the
// measures Measure gives.
func TestAssessPairWith(t *testing.T) {
	po := synth.PatternOptions{Seed: 3}
	flat := imageio.NewGray(96, 96)
	for i := range flat.Pix {
		flat.Pix[i] = 100
	}
	for _, ref := range []*imageio.Gray{render(t, po, synth.RenderOptions{}, 96), flat} {
		def := render(t, po, synth.RenderOptions{Gain: 0.6 * 255}, 96)
		want, err := quality.AssessPair(ref, def, nil, quality.Thresholds{})
		if err != nil {
			t.Fatal(err)
		}
		first, m, err := quality.AssessPairWith(ref, nil, def, nil, quality.Thresholds{})
		if err != nil {
			t.Fatal(err)
		}
		direct, err := quality.Measure(ref, nil)
		if err != nil {
			t.Fatal(err)
		}
		if m.Clean() != direct.Clean() || math.IsNaN(m.SpeckleSize) != math.IsNaN(direct.SpeckleSize) {
			t.Errorf("returned reference measures %+v, Measure gives %+v", m, direct)
		}
		again, _, err := quality.AssessPairWith(nil, &m, def, nil, quality.Thresholds{})
		if err != nil {
			t.Fatal(err)
		}
		if !reflect.DeepEqual(first, want) || !reflect.DeepEqual(again, want) {
			t.Errorf("reports with the reference measured %+v\nand reused %+v\nwant %+v", first, again, want)
		}
	}
}

func TestRecommend(t *testing.T) {
	g := render(t, synth.PatternOptions{Seed: 4, Contrast: 0.2}, synth.RenderOptions{Noise: 1}, 192)
	ctx := context.Background()
	est, err := quality.Recommend(ctx, g, nil, 0.01, 0, 0, 0, 5)
	if err != nil {
		t.Fatal(err)
	}
	truth, err := quality.Recommend(ctx, g, nil, 0.01, math.Sqrt(1+1.0/12), 0, 8, 5)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("noise from the image %.3f: subset %d px (σ %.4f px); with the true noise: %d px; VSG %d px",
		est.Noise, est.SubsetPx, est.PredictedStdPx, truth.SubsetPx, est.VSGPx)
	if est.NoiseSource != "image" || truth.NoiseSource != "given" || est.SubsetPx < truth.SubsetPx || est.SubsetPx > truth.SubsetPx+4 {
		t.Errorf("estimated %+v, true %+v", est, truth)
	}
	if est.PredictedStdPx > 0.01 || est.VSGPx != 4*est.StepPx+est.SubsetPx || truth.VSGPx != 4*8+truth.SubsetPx {
		t.Errorf("prediction %.4f, VSG %d (step %d), %d", est.PredictedStdPx, est.VSGPx, est.StepPx, truth.VSGPx)
	}
	far, err := quality.Recommend(ctx, g, nil, 1e-5, 1, 0, 0, 5)
	if err != nil || far.SubsetPx != 0 || far.Problem == "" {
		t.Errorf("unreachable: %+v, %v", far, err)
	}
	if _, err := quality.Recommend(ctx, g, nil, 0.01, 1, 0, 0, 4); err == nil {
		t.Error("even strain window: no error")
	}
}

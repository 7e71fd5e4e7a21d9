package service_test

import (
	"bytes"
	"context"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/synth"
)

// The image check returns the quality warnings (an over-exposed image
// warns of saturation and says what to change) and the subset for the
// target uncertainty with its predicted noise and VSG, the same as
// quality.Recommend on the decoded image; bad query values are 400
// problems naming the parameter.
func TestImageCheckQualityAndRecommendation(t *testing.T) {
	ts := newServer(t, nil)
	g, _, err := synth.Pair(synth.PatternOptions{Seed: 2}, nil, synth.RenderOptions{W: 128, H: 128, Gain: 1.4 * 255, Noise: 1})
	if err != nil {
		t.Fatal(err)
	}
	var file bytes.Buffer
	if err := imageio.WritePNG(&file, g, 8); err != nil {
		t.Fatal(err)
	}
	resp, b := ts.do(t, "POST", "/v1/images/check?target_std=0.02&step=6", "image/png", file.Bytes())
	if resp.StatusCode != 200 {
		t.Fatalf("image check: %d %s", resp.StatusCode, b)
	}
	got := decodeJSON[service.ImageCheck](t, b)
	if got.Quality == nil || len(got.Quality.Warnings) == 0 || got.Quality.Warnings[0].Code != quality.Saturated ||
		!strings.Contains(got.Quality.Warnings[0].Action, "exposure") {
		t.Fatalf("quality %+v", got.Quality)
	}
	want, err := quality.Recommend(context.Background(), g, nil, 0.02, 0, 0, 6, 5)
	if err != nil {
		t.Fatal(err)
	}
	r := got.Recommendation
	if r == nil || r.SubsetPx != want.SubsetPx || r.SubsetPx == 0 || r.PredictedStdPx > 0.02 || r.StepPx != 6 || r.VSGPx != 4*6+r.SubsetPx || r.NoiseSource != "image" {
		t.Errorf("recommendation %+v, want subset %d (%s)", r, want.SubsetPx, got.RecommendationError)
	}
	resp, b = ts.do(t, "POST", "/v1/images/check?target_std=-1&strain_window=4", "image/png", file.Bytes())
	if resp.StatusCode != 400 || !strings.Contains(string(b), "target_std") || !strings.Contains(string(b), "strain_window") {
		t.Errorf("bad query: %d %s", resp.StatusCode, b)
	}
}

// An analysis job returns the image quality warnings in its summary: a
// deformed image 40 % darker than the reference warns of the brightness
// and contrast change; a good pair returns none.
func TestJobWarnings(t *testing.T) {
	ts := newServer(t, func(c *service.Config) { c.Analyzer, c.Workers = service.Pipeline{}, 1 })
	po := synth.PatternOptions{Seed: 3, Diameter: 4}
	r, _, err := synth.Pair(po, nil, synth.RenderOptions{W: 96, H: 96})
	if err != nil {
		t.Fatal(err)
	}
	_, d, err := synth.Pair(po, synth.Translation{U: 0.4}, synth.RenderOptions{W: 96, H: 96, Gain: 0.6 * 255})
	if err != nil {
		t.Fatal(err)
	}
	enc := func(g *imageio.Gray) []byte {
		var b bytes.Buffer
		if err := imageio.WritePNG(&b, g, 8); err != nil {
			t.Fatal(err)
		}
		return b.Bytes()
	}
	for _, c := range []struct {
		name string
		def  []byte
		want []string
	}{
		{"darker", enc(d), []string{quality.NarrowRange, quality.BrightnessChange, quality.ContrastDrop}},
		{"good", enc(r), nil},
	} {
		ct, body := multipartBody(t, analysisParts(enc(r), c.def, `{"subset": 21, "step": 12}`)...)
		resp, b := ts.do(t, "POST", "/v1/analyses?wait=true", ct, body)
		if resp.StatusCode != 200 {
			t.Fatalf("%s: POST: %d %s", c.name, resp.StatusCode, b)
		}
		j := decodeJSON[jobDoc](t, b)
		var got []string
		for _, w := range j.Summary.Warnings {
			got = append(got, w.Code)
			if w.Image != "deformed" || w.Action == "" {
				t.Errorf("%s: warning %+v", c.name, w)
			}
		}
		if strings.Join(got, " ") != strings.Join(c.want, " ") {
			t.Errorf("%s: warnings %v, want %v", c.name, got, c.want)
		}
	}
}

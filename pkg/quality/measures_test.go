package quality_test

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
	"github.com/mottledic/mottle/pkg/roi"
	"github.com/mottledic/mottle/pkg/synth"
	"github.com/mottledic/mottle/pkg/verify"
)

// render draws the reference image of pattern po with camera ro (W = H = w).
func render(t *testing.T, po synth.PatternOptions, ro synth.RenderOptions, w int) *imageio.Gray {
	t.Helper()
	ro.W, ro.H = w, w
	p, err := synth.PatternFor(po, synth.Identity{}, w, w)
	if err != nil {
		t.Fatal(err)
	}
	g, _, err := synth.Render(p, synth.Identity{}, ro)
	if err != nil {
		t.Fatal(err)
	}
	return g
}

func codes(ws []quality.Warning) []string {
	var c []string
	for _, w := range ws {
		c = append(c, w.Code)
	}
	return c
}

func measure(t *testing.T, g *imageio.Gray) quality.Measures {
	t.Helper()
	m, err := quality.Measure(g, nil)
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// count returns the share of pixels of g for which f holds.
func count(g *imageio.Gray, f func(v float64) bool) float64 {
	n := 0
	for y := 0; y < g.H; y++ {
		for _, v := range g.Pix[y*g.Stride : y*g.Stride+g.W] {
			if f(float64(v)) {
				n++
			}
		}
	}
	return float64(n) / float64(g.W*g.H)
}

// Rendered images with known saturation, clipping, gain and blur give the
// expected measures and warnings; the ideal image none. The truth of the
// saturated and clipped fractions is the unquantised rendering of the same
// scene: a pixel saturates in 8 bits when its exact grey level rounds to 255
// or more (≥ 254.5), and is black when it rounds to 0 or less (< 0.5).
func TestRenderedMeasuresAndWarnings(t *testing.T) {
	const w = 192
	po := synth.PatternOptions{Seed: 3}
	cases := []struct {
		name  string
		ro    synth.RenderOptions
		want  []string // warning codes, in Check's order
		check func(t *testing.T, m quality.Measures, exact *imageio.Gray)
	}{
		{"ideal", synth.RenderOptions{Noise: 0.5}, nil, func(t *testing.T, m quality.Measures, _ *imageio.Gray) {
			if m.Saturated != 0 || m.Clipped != 0 || m.SignalBits != 8 || m.FullScale != 255 {
				t.Errorf("saturated %g clipped %g bits %d full scale %g", m.Saturated, m.Clipped, m.SignalBits, m.FullScale)
			}
			// Background 0.8 and speckles 0.2 of full scale: a span of 0.6.
			if math.Abs(m.UsedRange-0.6) > 0.03 {
				t.Errorf("used range %.3f, want about 0.6 (pattern from 0.2 to 0.8 of full scale)", m.UsedRange)
			}
		}},
		{"saturated", synth.RenderOptions{Gain: 1.5 * 255}, []string{quality.Saturated}, func(t *testing.T, m quality.Measures, exact *imageio.Gray) {
			want := count(exact, func(v float64) bool { return v >= 254.5 })
			if want < 0.2 || m.Saturated != want {
				t.Errorf("saturated fraction %.5f, want %.5f from the exact rendering", m.Saturated, want)
			}
		}},
		{"black clipped", synth.RenderOptions{Offset: -70}, []string{quality.Clipped}, func(t *testing.T, m quality.Measures, exact *imageio.Gray) {
			want := count(exact, func(v float64) bool { return v < 0.5 })
			if want < 0.2 || m.Clipped != want {
				t.Errorf("clipped fraction %.5f, want %.5f from the exact rendering", m.Clipped, want)
			}
		}},
		{"low gain", synth.RenderOptions{Gain: 0.08 * 255, Noise: 0.5},
			[]string{quality.NarrowRange, quality.FewLevels, quality.WeakGradient}, func(t *testing.T, m quality.Measures, _ *imageio.Gray) {
				// Pattern span 0.6 × gain 0.08 of full scale: about 12 levels,
				// widened by about ±3σ of the noise at the 0.1 and 99.9 %
				// percentiles: 0.048 + 3/255 ≈ 0.06.
				if math.Abs(m.UsedRange-0.06) > 0.01 || m.UsedLevels > 20 {
					t.Errorf("used range %.4f (want about 0.06), %d levels", m.UsedRange, m.UsedLevels)
				}
			}},
		{"blurred", synth.RenderOptions{Blur: 2}, []string{quality.Blurred}, func(t *testing.T, m quality.Measures, _ *imageio.Gray) {
			if m.EdgeWidth < 5 {
				t.Errorf("edge width %.2f px, want more than 5 (√(2π)·2 px)", m.EdgeWidth)
			}
		}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			g := render(t, po, c.ro, w)
			ro := c.ro
			ro.Float = true
			exact := render(t, po, ro, w)
			m := measure(t, g)
			ws := quality.Check(m, "reference", quality.Thresholds{})
			t.Logf("saturated %.4f clipped %.4f range %.3f levels %d (%.1f bits) gradient %.2f speckle %.2f edge %.2f noise %.2f: %v",
				m.Saturated, m.Clipped, m.UsedRange, m.UsedLevels, m.UsedBits, m.MeanGradient, m.SpeckleSize, m.EdgeWidth, m.Noise, codes(ws))
			if !slices.Equal(codes(ws), c.want) {
				t.Errorf("warnings %v, want %v", codes(ws), c.want)
			}
			for _, w := range ws {
				if w.Action == "" || w.Message == "" || w.Source == "" || w.Image != "reference" {
					t.Errorf("warning %+v lacks a message, an action, a source or the image name", w)
				}
			}
			c.check(t, m, exact)
		})
	}
}

// A Gaussian blur of σ spreads an isolated step of height C so that its
// peak slope is C/(σ√(2π)): the edge width is √(2π)·σ. Large, sparse
// speckles keep the edges isolated; pixel integration adds a variance of
// 1/12 px² to the blur (a unit box), and the pattern's own soft edge a
// little more, so the expectation is √(2π)·√(σ² + 1/12) with 10 % allowed.
func TestEdgeWidthOfBlurredStep(t *testing.T) {
	po := synth.PatternOptions{Seed: 4, Diameter: 28, Coverage: 0.3}
	for _, sigma := range []float64{2, 3} {
		g := render(t, po, synth.RenderOptions{Blur: sigma, Bits: 16}, 256)
		m := measure(t, g)
		want := math.Sqrt(2*math.Pi) * math.Sqrt(sigma*sigma+1.0/12)
		t.Logf("blur σ = %g px: edge width %.3f px, closed form %.3f", sigma, m.EdgeWidth, want)
		if math.Abs(m.EdgeWidth/want-1) > 0.10 {
			t.Errorf("blur σ = %g px: edge width %.3f px, want %.3f ± 10 %%", sigma, m.EdgeWidth, want)
		}
	}
}

// A later image with a known gain change (0.6×) and one with blur: Compare
// returns the change of brightness and contrast (−40 %, to quantisation)
// and the rise of blur, with their warnings; the same image again gives none.
func TestCompareGainAndBlur(t *testing.T) {
	const w = 192
	po := synth.PatternOptions{Seed: 5}
	ref := measure(t, render(t, po, synth.RenderOptions{}, w))
	same := measure(t, render(t, po, synth.RenderOptions{Noise: 0.5, Seed: 2}, w))
	dim := measure(t, render(t, po, synth.RenderOptions{Gain: 0.6 * 255}, w))
	soft := measure(t, render(t, po, synth.RenderOptions{Blur: 1.5}, w))
	th := quality.Thresholds{}
	if c, ws := quality.Compare(ref, same, "frame 1", th); len(ws) != 0 {
		t.Errorf("unchanged frame: change %+v, warnings %v", c, codes(ws))
	}
	c, ws := quality.Compare(ref, dim, "frame 2", th)
	t.Logf("gain 0.6: %+v %v", c, codes(ws))
	if math.Abs(c.Brightness+0.4) > 0.01 || math.Abs(c.Contrast+0.4) > 0.01 {
		t.Errorf("gain 0.6: brightness %+.4f contrast %+.4f, want −0.4 each", c.Brightness, c.Contrast)
	}
	if !slices.Equal(codes(ws), []string{quality.BrightnessChange, quality.ContrastDrop}) {
		t.Errorf("gain 0.6: warnings %v", codes(ws))
	}
	c, ws = quality.Compare(ref, soft, "frame 3", th)
	t.Logf("blur 1.5: %+v %v", c, codes(ws))
	if !slices.Contains(codes(ws), quality.BlurRise) || c.Blur < 0.3 {
		t.Errorf("blur 1.5 px: blur change %+.3f, warnings %v; want a blur_rise", c.Blur, codes(ws))
	}
	rep, err := quality.Assess(render(t, po, synth.RenderOptions{Gain: 0.6 * 255}, w), nil, "frame 2", &ref, th)
	if err != nil || rep.Change == nil || len(rep.Warnings) < 2 {
		t.Fatalf("Assess: %+v, %v", rep, err)
	}
	if _, err := json.Marshal(rep); err != nil {
		t.Errorf("report does not encode as JSON: %v", err)
	}
}

// A 12-bit camera: written into a 16-bit file its levels stay below 4096,
// or are shifted left by 4; both are read as 12 bits, saturating at 4095
// (or 65520).
func TestTwelveBitInSixteen(t *testing.T) {
	g := render(t, synth.PatternOptions{Seed: 6}, synth.RenderOptions{Bits: 12, Gain: 1.3 * 4095}, 128)
	g.Bits = 16
	m := measure(t, g)
	want := count(g, func(v float64) bool { return v >= 4095 })
	if m.SignalBits != 12 || m.FullScale != 4095 || m.Saturated != want || want == 0 {
		t.Errorf("right-aligned: %d bits, full scale %g, saturated %.4f (want 12, 4095, %.4f)", m.SignalBits, m.FullScale, m.Saturated, want)
	}
	for i := range g.Pix {
		g.Pix[i] *= 16
	}
	m = measure(t, g)
	if m.SignalBits != 12 || m.FullScale != 65520 || m.Saturated != want {
		t.Errorf("left-aligned: %d bits, full scale %g, saturated %.4f (want 12, 65520, %.4f)", m.SignalBits, m.FullScale, m.Saturated, want)
	}
}

// The noise of one image, estimated from the image alone, and from a
// static pair. The rendered noise σ plus the 8-bit quantisation noise
// (variance 1/12) is the truth; the single-image estimate may be 15 % off,
// the static pair 3 %.
func TestNoiseEstimates(t *testing.T) {
	po := synth.PatternOptions{Seed: 7}
	for _, sigma := range []float64{1, 2} {
		a := render(t, po, synth.RenderOptions{Noise: sigma, Seed: 1}, 256)
		b := render(t, po, synth.RenderOptions{Noise: sigma, Seed: 2}, 256)
		want := math.Sqrt(sigma*sigma + 1.0/12)
		img, err := quality.NoiseFromImage(a, nil)
		if err != nil {
			t.Fatal(err)
		}
		pair, err := quality.NoiseFromPair(a, b, nil)
		if err != nil {
			t.Fatal(err)
		}
		t.Logf("σ = %g: from the image %.3f, from the static pair %.3f, truth %.3f", sigma, img, pair, want)
		if math.Abs(img/want-1) > 0.15 || math.Abs(pair/want-1) > 0.03 {
			t.Errorf("σ = %g: estimates %.3f (image) and %.3f (pair), want %.3f", sigma, img, pair, want)
		}
	}
}

// Bad input gives an error, never a panic.
func TestBadInput(t *testing.T) {
	g := render(t, synth.PatternOptions{Seed: 1}, synth.RenderOptions{}, 32)
	nan := render(t, synth.PatternOptions{Seed: 1}, synth.RenderOptions{}, 32)
	nan.Pix[40] = float32(math.NaN())
	for _, c := range []struct {
		name string
		g    *imageio.Gray
		mask *roi.Mask
	}{
		{"nil", nil, nil}, {"empty", &imageio.Gray{}, nil}, {"mask size", g, roi.Full(8, 8)}, {"NaN", nan, nil},
	} {
		if _, err := quality.Measure(c.g, c.mask); err == nil {
			t.Errorf("%s: no error", c.name)
		}
	}
	flat := imageio.NewGray(32, 32)
	m, err := quality.Measure(flat, nil)
	if err != nil || !math.IsNaN(m.SpeckleSize) || m.SpeckleError == "" {
		t.Errorf("uniform image: %v, speckle %v (%q)", err, m.SpeckleSize, m.SpeckleError)
	}
	if _, err := json.Marshal(m.Clean()); err != nil {
		t.Errorf("cleaned measures do not encode: %v", err)
	}
	if _, err := quality.NoiseFromPair(g, flat.Sub(0, 0, 16, 16), nil); err == nil {
		t.Error("static pair of different sizes: no error")
	}
	if err := (quality.Thresholds{MaxSaturated: 2, MinSpeckle: 20}).Validate(); err == nil ||
		!strings.Contains(err.Error(), "max_saturated_fraction") || !strings.Contains(err.Error(), "min/max_speckle_px") {
		t.Errorf("bad thresholds: %v", err)
	}
	if _, err := quality.ChooseSubset(context.Background(), g, quality.SubsetOptions{}); err == nil ||
		!strings.Contains(err.Error(), "target") || !strings.Contains(err.Error(), "noise") {
		t.Errorf("subset options without target and noise: %v", err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := quality.ChooseSubset(ctx, g, quality.SubsetOptions{Target: 0.01, Noise: 1}); !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled: %v", err)
	}
}

// The mean intensity gradient (Sobel) and the saturated and clipped
// fractions agree with SciPy (scipy.ndimage.sobel) and NumPy on the same
// images, through Debian's /usr/bin/python3 and scripts/ref_quality.py
// (Pan, Lu & Xie 2010 for the measure; SciPy as the reference library).
func TestAgreesWithSciPy(t *testing.T) {
	if err := exec.Command(verify.Python, "-c", "import numpy, scipy.ndimage").Run(); err != nil {
		t.Fatalf("%s cannot import scipy: %v; install the Debian packages python3-scipy python3-numpy", verify.Python, err)
	}
	scripts, err := verify.FindScripts(".")
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	po := synth.PatternOptions{Seed: 8}
	imgs := []*imageio.Gray{
		render(t, po, synth.RenderOptions{Noise: 1}, 160),
		render(t, po, synth.RenderOptions{Gain: 2 * 255, Offset: -150, Blur: 1}, 160),
		render(t, synth.PatternOptions{Seed: 9, Diameter: 8}, synth.RenderOptions{Bits: 16, Noise: 30}, 200),
	}
	type item struct {
		Path      string  `json:"path"`
		FullScale float64 `json:"full_scale"`
	}
	var req struct {
		Images []item `json:"images"`
	}
	var ms []quality.Measures
	for i, g := range imgs {
		p := filepath.Join(dir, "im"+string(rune('0'+i))+".npy")
		if err := verify.WriteNPY(p, g); err != nil {
			t.Fatal(err)
		}
		m := measure(t, g)
		ms = append(ms, m)
		req.Images = append(req.Images, item{p, m.FullScale})
	}
	body, _ := json.Marshal(req)
	rp := filepath.Join(dir, "req.json")
	if err := os.WriteFile(rp, body, 0o644); err != nil {
		t.Fatal(err)
	}
	var stdout, stderr bytes.Buffer
	cmd := exec.Command(verify.Python, filepath.Join(scripts, "ref_quality.py"), rp)
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	if err := cmd.Run(); err != nil {
		t.Fatalf("ref_quality.py: %v: %s", err, stderr.String())
	}
	var resp struct {
		Version string `json:"version"`
		Results []struct {
			MeanGradient float64 `json:"mean_gradient"`
			Saturated    float64 `json:"saturated_fraction"`
			Clipped      float64 `json:"black_clipped_fraction"`
		} `json:"results"`
	}
	if err := json.Unmarshal(stdout.Bytes(), &resp); err != nil || len(resp.Results) != len(imgs) {
		t.Fatalf("ref_quality.py output %q: %v", stdout.String(), err)
	}
	for i, r := range resp.Results {
		m := ms[i]
		t.Logf("image %d: mean gradient %.9g (SciPy %s: %.9g), saturated %.6f (%.6f), clipped %.6f (%.6f)",
			i, m.MeanGradient, resp.Version, r.MeanGradient, m.Saturated, r.Saturated, m.Clipped, r.Clipped)
		if math.Abs(m.MeanGradient/r.MeanGradient-1) > 1e-9 || m.Saturated != r.Saturated || m.Clipped != r.Clipped {
			t.Errorf("image %d disagrees with SciPy/NumPy", i)
		}
	}
	if ms[1].Saturated == 0 || ms[1].Clipped == 0 {
		t.Errorf("image 1 should have saturated and clipped pixels: %+v", ms[1])
	}
}

// TestSpeckleWindow: images larger than imageio.MaxSpeckleWindow have
// their speckle size measured in the centred window of that size; on
// stationary Boolean patterns (fine and coarse speckles, noise σ 1) the
// window agrees with the crossing of the whole image's autocorrelation
// (imageio.Autocorrelation, FFT) within 3 % (seen: 0.2–1.6 % on 1024²
// renders of 3, 5 and 8 px speckles, two seeds each).
func TestSpeckleWindow(t *testing.T) {
	half := func(a []float64) float64 {
		for h := 1; h < len(a); h++ {
			if a[h] <= 0.5 {
				return float64(h-1) + (a[h-1]-0.5)/(a[h-1]-a[h])
			}
		}
		return math.NaN()
	}
	for _, d := range []float64{4, 8} {
		g := render(t, synth.PatternOptions{Diameter: d, Seed: 1}, synth.RenderOptions{Noise: 1}, 800)
		m, err := quality.Measure(g, nil)
		if err != nil {
			t.Fatal(err)
		}
		ax, ay, err := imageio.Autocorrelation(g, 64)
		if err != nil {
			t.Fatal(err)
		}
		if whole := half(ax) + half(ay); !(math.Abs(m.SpeckleSize/whole-1) <= 0.03) {
			t.Errorf("%g px speckles: windowed speckle size %.4f px, whole image %.4f px (want within 3 %%)", d, m.SpeckleSize, whole)
		}
	}
}

// Measure's noise over the whole image reuses the range of its first pass;
// it must be NoiseFromImage's value bit for bit, also for images whose
// darkest or brightest pixels are cut off (left out of the estimate) and
// for a masked ROI, where NoiseFromImage still takes the whole image's
// range.
func TestMeasureNoiseIsNoiseFromImage(t *testing.T) {
	base := render(t, synth.PatternOptions{Seed: 3}, synth.RenderOptions{Noise: 2, Seed: 4}, 96)
	clipped := &imageio.Gray{W: base.W, H: base.H, Stride: base.Stride, Bits: base.Bits, Pix: slices.Clone(base.Pix)}
	for i, v := range clipped.Pix {
		switch {
		case v < 60:
			clipped.Pix[i] = 0
		case v > 200:
			clipped.Pix[i] = 255
		}
	}
	mask, err := (&roi.Spec{Rect: &[4]int{10, 12, 60, 52}}).Mask(base.W, base.H)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name string
		g    *imageio.Gray
		mask *roi.Mask
	}{{"plain", base, nil}, {"clipped", clipped, nil}, {"masked", clipped, mask}} {
		m, err := quality.Measure(c.g, c.mask)
		if err != nil {
			t.Fatal(err)
		}
		want, err := quality.NoiseFromImage(c.g, c.mask)
		if err != nil {
			t.Fatal(err)
		}
		if math.Float64bits(m.Noise) != math.Float64bits(want) {
			t.Errorf("%s: Measure's noise %v, NoiseFromImage %v", c.name, m.Noise, want)
		}
	}
}

package main

import (
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
	"github.com/mottledic/mottle/pkg/synth"
)

// analyze prints the image quality warnings with what to change at the
// bench (an over-exposed deformed image), and --subset auto chooses the
// subset from the reference and a static image, writes the choice and the
// map of required subsets, and analyses with it.
func TestAnalyzeQualityAndAutoSubset(t *testing.T) {
	dir := t.TempDir()
	po := synth.PatternOptions{Seed: 4, Contrast: 0.5}
	ro := synth.RenderOptions{W: 160, H: 160, Noise: 1}
	ref, static, err := synth.Pair(po, nil, ro)
	if err != nil {
		t.Fatal(err)
	}
	ro.Gain, ro.Seed = 1.3*255, 5
	_, bright, err := synth.Pair(po, nil, ro)
	if err != nil {
		t.Fatal(err)
	}
	paths := map[string]*imageio.Gray{"ref.png": ref, "static.png": static, "bright.png": bright}
	for name, g := range paths {
		if err := imageio.WriteFile(filepath.Join(dir, name), g, 8); err != nil {
			t.Fatal(err)
		}
	}
	p := func(n string) string { return filepath.Join(dir, n) }

	e, stdout, stderr := testEnv()
	if code := run(context.Background(), e, []string{"analyze", "--ref", p("ref.png"), "--def", p("bright.png"),
		"--subset", "21", "--step", "16", "--out", p("r1")}); code != 0 {
		t.Fatalf("analyze: exit %d: %s", code, stderr.String())
	}
	if s := stdout.String(); !strings.Contains(s, "deformed: ") || !strings.Contains(s, "saturated") || !strings.Contains(s, "shorten the exposure") {
		t.Errorf("no saturation warning with its fix:\n%s", s)
	}

	e, stdout, stderr = testEnv()
	if code := run(context.Background(), e, []string{"analyze", "--ref", p("ref.png"), "--def", p("static.png"),
		"--subset", "auto", "--target-std", "0.01", "--static", p("static.png"), "--step", "16", "--formats", "json", "--out", p("r2")}); code != 0 {
		t.Fatalf("analyze --subset auto: exit %d: %s", code, stderr.String())
	}
	if s := stdout.String(); !strings.Contains(s, "automatic subset") || !strings.Contains(s, "no warnings") {
		t.Errorf("output:\n%s", s)
	}
	b, err := os.ReadFile(p("r2/subset_choice.json"))
	if err != nil {
		t.Fatal(err)
	}
	var c quality.SubsetChoice
	if err := json.Unmarshal(b, &c); err != nil || c.Subset < 7 || c.Predicted > 0.01 {
		t.Fatalf("subset_choice.json: %v, %+v", err, c)
	}
	fh, err := os.Open(p("r2/field.json"))
	if err != nil {
		t.Fatal(err)
	}
	f, err := field.ReadJSON(fh)
	fh.Close()
	if err != nil || f.Grid.Subset != c.Subset {
		t.Errorf("field.json subset %d, chosen %d (%v)", f.Grid.Subset, c.Subset, err)
	}
	csv, err := os.ReadFile(p("r2/required_subset.csv"))
	if err != nil || !strings.HasPrefix(string(csv), "x_px,y_px,required_subset_px\n") || strings.Count(string(csv), "\n") < 10 {
		t.Errorf("required_subset.csv: %v %q", err, csv)
	}

	e, _, stderr = testEnv()
	if code := run(context.Background(), e, []string{"analyze", "--ref", p("ref.png"), "--def", p("static.png"),
		"--subset", "auto", "--target-std", "1e-5", "--out", p("r3")}); code != 1 || !strings.Contains(stderr.String(), "not reachable") {
		t.Errorf("unreachable target: exit %d, %q", code, stderr.String())
	}
	e, _, stderr = testEnv()
	if code := run(context.Background(), e, []string{"analyze", "--ref", p("ref.png"), "--def", p("static.png"), "--subset", "big"}); code == 0 ||
		!strings.Contains(stderr.String(), "auto") {
		t.Errorf("--subset big: exit %d, %q", code, stderr.String())
	}
}

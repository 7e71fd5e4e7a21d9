package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
	"github.com/mottledic/mottle/pkg/synth"
)

func testEnv() (*env, *bytes.Buffer, *bytes.Buffer) {
	var out, errb bytes.Buffer
	return &env{stdout: &out, stderr: &errb}, &out, &errb
}

// TestHelp checks that every command prints its usage for --help and exits 0.
func TestHelp(t *testing.T) {
	for _, c := range commands() {
		e, out, _ := testEnv()
		if code := run(context.Background(), e, []string{c.name, "--help"}); code != 0 {
			t.Errorf("%s --help: exit %d", c.name, code)
		}
		if !strings.Contains(out.String(), "Usage: mottle "+c.name) {
			t.Errorf("%s --help printed %q", c.name, out.String())
		}
	}
	e, _, errb := testEnv()
	if code := run(context.Background(), e, []string{"frobnicate"}); code != 2 || !strings.Contains(errb.String(), "unknown command") {
		t.Errorf("unknown command: exit %d, %q", code, errb.String())
	}
}

// TestUsageAligned checks that the command list of "mottle help" starts
// every summary in one column, whatever the longest command name is.
func TestUsageAligned(t *testing.T) {
	var b bytes.Buffer
	usage(&b)
	col := -1
	n := 0
	for _, line := range strings.Split(b.String(), "\n") {
		for _, c := range commands() {
			if !strings.HasPrefix(line, "  "+c.name+" ") {
				continue
			}
			i := strings.Index(line, c.summary)
			if i < 0 {
				t.Fatalf("line %q lacks the summary of %s", line, c.name)
			}
			if col >= 0 && i != col {
				t.Errorf("summary of %s starts at column %d, others at %d:\n%s", c.name, i, col, b.String())
			}
			col = i
			n++
		}
	}
	if n != len(commands()) {
		t.Errorf("%d of %d commands listed:\n%s", n, len(commands()), b.String())
	}
}

// TestAnalyzeAndMap runs analyze on an exactly rendered uniform stretch
// (pkg/synth) and checks the written field against the closed form
// E11 = (λ² − 1)/2 (Holzapfel 2000), then re-renders a map with map.
func TestAnalyzeAndMap(t *testing.T) {
	dir := t.TempDir()
	const lambda = 1.02
	m := synth.Affine{F: [2][2]float64{{lambda, 0}, {0, 1}}, CX: 100, CY: 80}
	ref, def, err := synth.Pair(synth.PatternOptions{Diameter: 5, EdgeBlur: 1, Seed: 3}, m, synth.RenderOptions{W: 200, H: 160, Bits: 8})
	if err != nil {
		t.Fatal(err)
	}
	refPath, defPath := filepath.Join(dir, "ref.png"), filepath.Join(dir, "def.tif")
	if err := imageio.WriteFile(refPath, ref, 8); err != nil {
		t.Fatal(err)
	}
	if err := imageio.WriteFile(defPath, def, 8); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "res")
	e, stdout, stderr := testEnv()
	args := []string{"analyze", "--ref", refPath, "--def", defPath, "--subset", "25", "--step", "10", "--out", out, "--mm-per-px", "0.1"}
	if code := run(context.Background(), e, args); code != 0 {
		t.Fatalf("analyze: exit %d: %s", code, stderr.String())
	}
	if !strings.Contains(stdout.String(), "E11") || !strings.Contains(stdout.String(), "caution") {
		t.Errorf("summary lacks E11 or the caution:\n%s", stdout.String())
	}
	f, err := results.ReadStored(out)
	if err != nil {
		t.Fatal(err)
	}
	s, _ := f.Summary("E11")
	if want := (lambda*lambda - 1) / 2; s.Count == 0 || abs(s.Mean-want) > 5e-4 {
		t.Errorf("mean E11 %.5f over %d points, want %.5f", s.Mean, s.Count, want)
	}
	if f.Units["u"] != "mm" {
		t.Errorf("u unit %q, want mm", f.Units["u"])
	}
	// The default folder holds the stored result and the default maps.
	for _, name := range []string{"field.npz", "maps/E11.png", "maps/E22.png"} {
		if st, err := os.Stat(filepath.Join(out, name)); err != nil || st.Size() == 0 {
			t.Errorf("default results folder lacks %s: %v", name, err)
		}
	}
	if _, err := os.Stat(filepath.Join(out, "field.json")); err == nil {
		t.Error("the default results folder holds field.json; it is written on request only")
	}
	e, _, stderr = testEnv()
	if code := run(context.Background(), e, []string{"map", out, "--quantity", "E22", "--on", "deformed"}); code != 0 {
		t.Fatalf("map: exit %d: %s", code, stderr.String())
	}
	if st, err := os.Stat(filepath.Join(out, "maps", "E22_deformed.png")); err != nil || st.Size() == 0 {
		t.Errorf("map did not write E22_deformed.png: %v", err)
	}
	// Bad input: a missing file names itself; a bad quantity lists the known ones.
	e, _, stderr = testEnv()
	if code := run(context.Background(), e, []string{"analyze", "--ref", filepath.Join(dir, "nope.png"), "--def", defPath}); code != 1 || !strings.Contains(stderr.String(), "nope.png") {
		t.Errorf("missing reference: exit %d, %q", code, stderr.String())
	}
	e, _, stderr = testEnv()
	if code := run(context.Background(), e, []string{"map", out, "--quantity", "E33"}); code != 1 || !strings.Contains(stderr.String(), "E11") {
		t.Errorf("unknown quantity: exit %d, %q", code, stderr.String())
	}
	e, _, stderr = testEnv()
	if code := run(context.Background(), e, []string{"analyze", "--ref", refPath, "--def", defPath, "--subset", "30"}); code != 1 || !strings.Contains(stderr.String(), "subset") {
		t.Errorf("even subset: exit %d, %q", code, stderr.String())
	}
}

func abs(x float64) float64 {
	if x < 0 {
		return -x
	}
	return x
}

package main

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

func runSynthArgs(t *testing.T, args ...string) (int, string, string) {
	t.Helper()
	var out, errb bytes.Buffer
	code := run(context.Background(), &env{stdout: &out, stderr: &errb}, append([]string{"synth"}, args...))
	return code, out.String(), errb.String()
}

// TestSynthCommand: the command writes both images and a truth file whose
// points agree with the motion's exact field (synth.At), for a pair and a
// loading series.
func TestSynthCommand(t *testing.T) {
	dir := t.TempDir()
	code, out, errs := runSynthArgs(t, "--out", dir, "--size", "96x80", "--motion", "hole:radius_px=12,stress_MPa=500",
		"--bits", "16", "--format", "tiff", "--noise", "3", "--grid-step", "8")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	if !strings.Contains(out, "wrote") {
		t.Errorf("stdout %q", out)
	}
	for _, f := range []string{"reference.tif", "deformed.tif"} {
		g, err := imageio.ReadFile(filepath.Join(dir, f), imageio.Limits{})
		if err != nil {
			t.Fatal(err)
		}
		if g.W != 96 || g.H != 80 || g.Bits != 16 {
			t.Errorf("%s: %d×%d, %d bits", f, g.W, g.H, g.Bits)
		}
	}
	var tf synth.TruthFile
	b, err := os.ReadFile(filepath.Join(dir, "truth.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &tf); err != nil {
		t.Fatal(err)
	}
	if len(tf.Frames) != 1 || tf.Grid.NX != 12 || tf.Grid.NY != 10 || len(tf.Frames[0].Points) != 120 {
		t.Fatalf("truth: %d frames, grid %+v", len(tf.Frames), tf.Grid)
	}
	m, err := synth.NewMotion(tf.Frames[0].Spec, 0, 0)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range tf.Frames[0].Points {
		want := synth.At(m, p.X, p.Y)
		if p.Material != want.Material || math.Abs(p.U-want.U) > 1e-12 || math.Abs(p.F11-want.F[0][0]) > 1e-12 {
			t.Fatalf("truth point %+v, exact %+v", p, want)
		}
	}

	dir2 := t.TempDir()
	if code, _, errs := runSynthArgs(t, "--out", dir2, "--size", "48x48", "--motion", "translation:u=2", "--frames", "3", "--full-load", "600"); code != 0 {
		t.Fatalf("series: exit %d: %s", code, errs)
	}
	for _, f := range []string{"reference.png", "frame_001.png", "frame_002.png", "frame_003.png"} {
		if _, err := os.Stat(filepath.Join(dir2, f)); err != nil {
			t.Error(err)
		}
	}
}

func TestSynthCommandUsage(t *testing.T) {
	code, out, _ := runSynthArgs(t, "--help")
	if code != 0 || !strings.Contains(out, "hole:") || !strings.Contains(out, "--noise") {
		t.Errorf("--help: exit %d, output lacks motions or flags", code)
	}
	for _, args := range [][]string{
		{"--size", "0x4"}, {"--motion", "spin"}, {"--bits", "10"}, {"--format", "gif"},
		{"--frames", "2", "--static", "2"}, {"--motion", "affine:F11=-1"},
	} {
		if code, _, errs := runSynthArgs(t, append(args, "--out", t.TempDir())...); code != 2 || errs == "" {
			t.Errorf("%v: exit %d, stderr %q; want 2 and a message", args, code, errs)
		}
	}
}

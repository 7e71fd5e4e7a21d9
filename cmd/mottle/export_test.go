package main

import (
	"bytes"
	"context"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// TestExportRoundTrip: a results folder written with every format in one
// run, and a folder that holds only its stored result (field.npz) with
// every format exported afterwards by mottle export, hold byte-identical
// files: each format written on demand holds exactly what it holds when
// written with the analysis.
func TestExportRoundTrip(t *testing.T) {
	dir := t.TempDir()
	m := synth.Affine{F: [2][2]float64{{1.01, 0.002}, {0, 0.995}}, CX: 90, CY: 70, U: 1.3, V: -0.6}
	ref, def, err := synth.Pair(synth.PatternOptions{Diameter: 5, EdgeBlur: 1, Seed: 5}, m, synth.RenderOptions{W: 180, H: 140, Bits: 8})
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
	all := filepath.Join(dir, "all")
	e, _, stderr := testEnv()
	if code := run(context.Background(), e, []string{"analyze", "--ref", refPath, "--def", defPath, "--subset", "21", "--step", "8", "--out", all, "--formats", "all"}); code != 0 {
		t.Fatalf("analyze: exit %d: %s", code, stderr.String())
	}
	later := filepath.Join(dir, "later")
	if err := os.MkdirAll(later, 0o755); err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(filepath.Join(all, "field.npz"))
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(later, "field.npz"), b, 0o644); err != nil {
		t.Fatal(err)
	}
	e, stdout, stderr := testEnv()
	if code := run(context.Background(), e, []string{"export", later, "--formats", "all"}); code != 0 {
		t.Fatalf("export: exit %d: %s", code, stderr.String())
	}
	if !strings.Contains(stdout.String(), "field.csv") {
		t.Errorf("export printed %q", stdout.String())
	}
	files := 0
	err = filepath.WalkDir(all, func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		rel, _ := filepath.Rel(all, p)
		files++
		want, _ := os.ReadFile(p)
		got, err := os.ReadFile(filepath.Join(later, rel))
		if err != nil {
			t.Errorf("exported folder lacks %s", rel)
			return nil
		}
		if !bytes.Equal(got, want) {
			t.Errorf("%s: exported (%d bytes) differs from the one written with the analysis (%d bytes)", rel, len(got), len(want))
			if strings.HasSuffix(rel, ".json") {
				for i := range min(len(got), len(want)) {
					if got[i] != want[i] {
						t.Logf("first difference at byte %d: %q vs %q", i, got[max(0, i-80):min(len(got), i+80)], want[max(0, i-80):min(len(want), i+80)])
						break
					}
				}
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	for _, name := range []string{"field.json", "field.csv", "field.vts", "npy/E11.npy", "spatial.npz", "spatial.vts", "reference.png", "deformed.png", "maps/u.png", "maps/E11_deformed.png", "maps/vectors.png"} {
		if _, err := os.Stat(filepath.Join(all, name)); err != nil {
			t.Errorf("--formats all did not write %s", name)
		}
	}
	if files < 40 {
		t.Errorf("compared %d files; --formats all should write more than 40", files)
	}
	// Bad input: an unknown format lists the known ones; a folder without a
	// stored result says so.
	e, _, stderr = testEnv()
	if code := run(context.Background(), e, []string{"export", later, "--formats", "csv,xls"}); code != 2 || !strings.Contains(stderr.String(), "vts") {
		t.Errorf("unknown format: exit %d, %q", code, stderr.String())
	}
	e, _, stderr = testEnv()
	if code := run(context.Background(), e, []string{"export", dir, "--formats", "csv"}); code != 1 || !strings.Contains(stderr.String(), "field.npz") {
		t.Errorf("no stored result: exit %d, %q", code, stderr.String())
	}
}

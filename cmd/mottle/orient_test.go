package main

import (
	"math"
	"path/filepath"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/results"
)

// TestAnalyzeEXIFOrientation analyses the same scene twice: saved upright,
// and as a camera held a quarter turn stores it (pixels turned 90°
// counter-clockwise, EXIF orientation 6 = "turn 90° clockwise to show",
// CIPA DC-008, tag 0x0112), from the shared fixtures in testdata/images.
// After the orientation is applied the two displacement fields must agree
// point for point: the scene was moved by u = 1.3 px, v = −0.6 px and
// stretched 0.5 % along x, so a pair analysed as stored would show the
// motion along the other axis (u ≈ 0.6, v ≈ 1.3) and fail by over 1 px.
// The two JPEGs are compressed separately (their 8×8 blocks see different
// pixels), so the fields agree to 0.02 px RMS rather than bit for bit.
func TestAnalyzeEXIFOrientation(t *testing.T) {
	dir := t.TempDir()
	td := filepath.Join("..", "..", "testdata", "images")
	fields := map[string]map[string][]float64{}
	for _, kind := range []string{"upright", "exif6"} {
		out := filepath.Join(dir, kind)
		code, stdout, stderr := runCmd(t, "analyze",
			"--ref", filepath.Join(td, "scene-ref-"+kind+".jpg"), "--def", filepath.Join(td, "scene-def-"+kind+".jpg"),
			"--subset", "25", "--step", "10", "--out", out, "--formats", "npz")
		if code != 0 {
			t.Fatalf("analyze %s: exit %d: %s", kind, code, stderr)
		}
		f, err := results.ReadStored(out)
		if err != nil {
			t.Fatal(err)
		}
		if kind == "exif6" {
			if !strings.Contains(stdout, "orientation 6") {
				t.Errorf("analyze did not say which orientation it applied:\n%s", stdout)
			}
			if o := recordedOrientation(f); o != 6 {
				t.Errorf("the result records orientation %d, want 6 (extra %v)", o, f.Meta.Extra["orientation"])
			}
		} else if _, ok := f.Meta.Extra["orientation"]; ok {
			t.Errorf("an upright pair records an orientation: %v", f.Meta.Extra["orientation"])
		}
		if f.Meta.ImageWidth != 160 || f.Meta.ImageHeight != 120 {
			t.Errorf("%s: measured on %d×%d px, want the upright 160×120", kind, f.Meta.ImageWidth, f.Meta.ImageHeight)
		}
		fields[kind] = map[string][]float64{}
		for _, q := range []string{"u", "v"} {
			v, ok := f.Get(q)
			if !ok {
				t.Fatalf("%s: no %s", kind, q)
			}
			fields[kind][q] = v
		}
	}
	for _, q := range []string{"u", "v"} {
		a, b := fields["upright"][q], fields["exif6"][q]
		if len(a) != len(b) {
			t.Fatalf("%s: %d points upright, %d from the tagged pair", q, len(a), len(b))
		}
		var ss float64
		n := 0
		for i := range a {
			if math.IsNaN(a[i]) || math.IsNaN(b[i]) {
				continue
			}
			ss += (a[i] - b[i]) * (a[i] - b[i])
			n++
		}
		if n < len(a)/2 {
			t.Fatalf("%s: only %d of %d points measured in both", q, n, len(a))
		}
		if rms := math.Sqrt(ss / float64(n)); rms > 0.02 {
			t.Errorf("%s differs by %.4f px RMS between the upright and the tagged pair, want ≤ 0.02", q, rms)
		}
	}
}

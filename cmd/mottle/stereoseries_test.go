package main

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// TestStereoSeriesCommand renders four pairs of a plane pulled along x
// (engineering strain 0, 0.2, 0.4, 0.6 %, Poisson's ratio 0.3 of an
// invented law with E = 50 GPa) while it moves 0.3 mm per frame toward
// the cameras, runs mottle stereo --series with an axial and a transverse
// extensometer, a load table and the area, and checks the curve and the
// properties: modulus and Poisson's ratio of the law within 3 % and 0.03.
// Bad input (frames not in pairs, an extensometer off the image) is
// refused with a message.
func TestStereoSeriesCommand(t *testing.T) {
	const w, h = 400, 300
	const E, nu, area = 50000.0, 0.3, 10.0
	dir := t.TempDir()
	rig := benchRigFile(t, dir, w, h)
	p, err := synth.NewPattern(synth.PatternOptions{Diameter: 11, Seed: 6, Bounds: synth.Rect{X0: -750, Y0: -600, X1: 750, Y1: 600}})
	if err != nil {
		t.Fatal(err)
	}
	lc, rc := synth.BenchRig(w, h)
	for _, d := range []string{"left", "right"} {
		os.MkdirAll(filepath.Join(dir, d), 0o755)
	}
	table := "frame,load_N\n"
	for k := range 4 {
		ea := 0.002 * float64(k)
		pl := synth.Placement{Shape: synth.Plane{}, Pose: synth.Pose{T: [3]float64{0, 0, 0.3 * float64(k)}},
			Motion: synth.Affine{F: [2][2]float64{{1 + ea, 0}, {0, 1 - nu*ea}}}}
		for s, c := range []synth.Cam{lc, rc} {
			g, _, err := synth.RenderSurface(tenth{p}, pl, c, synth.RenderOptions{W: w, H: h, Supersample: 2, Noise: 0.5, Seed: int64(2*k + s)})
			if err != nil {
				t.Fatal(err)
			}
			if err := imageio.WriteFile(filepath.Join(dir, []string{"left", "right"}[s], fmt.Sprintf("f%d.png", k)), g, 8); err != nil {
				t.Fatal(err)
			}
		}
		table += fmt.Sprintf("%d,%g\n", k, E*ea*area)
	}
	os.WriteFile(filepath.Join(dir, "loads.csv"), []byte(table), 0o644)
	out := filepath.Join(dir, "run")
	args := []string{"stereo", "--series", "--rig", rig, "--left", filepath.Join(dir, "left"), "--right", filepath.Join(dir, "right"),
		"--step", "12", "--ext", "axial:80,150,320,150", "--ext", "width:200,60,200,240", "--transverse", "width",
		"--area", "10", "--table", filepath.Join(dir, "loads.csv"), "--modulus-range", "0.001,0.007", "--out", out}
	code, stdout, stderr := runCmd(t, args...)
	if code != 0 {
		t.Fatalf("exit %d: %s %s", code, stdout, stderr)
	}
	t.Log(stdout)
	csv, err := os.ReadFile(filepath.Join(out, "curve.csv"))
	if err != nil || strings.Count(string(csv), "\n") != 5 || !strings.Contains(string(csv), "ext_axial_eng") {
		t.Errorf("curve.csv: %v, %q: want a header and four rows with ext_axial_eng", err, csv)
	}
	var pj struct {
		Properties struct {
			Modulus *struct{ E float64 }  `json:"youngs_modulus"`
			Poisson *struct{ Nu float64 } `json:"poissons_ratio"`
			Skipped map[string]string
		}
	}
	b, err := os.ReadFile(filepath.Join(out, "properties.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &pj); err != nil {
		t.Fatal(err)
	}
	pr := pj.Properties
	if pr.Modulus == nil || pr.Poisson == nil {
		t.Fatalf("properties.json: no modulus or Poisson's ratio: %v", pr.Skipped)
	}
	if math.Abs(pr.Modulus.E/E-1) > 0.03 || math.Abs(pr.Poisson.Nu-nu) > 0.03 {
		t.Errorf("E %.0f MPa, ν %.3f: want %.0f within 3 %% and %.1f within 0.03", pr.Modulus.E, pr.Poisson.Nu, E, nu)
	}
	if _, err := os.Stat(filepath.Join(out, "final", "field.vts")); err != nil {
		t.Errorf("final/field.vts: %v", err)
	}
	// A series stopped after three pairs and resumed with the fourth
	// (--resume: from the saved state, nothing matched again) ends with
	// the curve of the run straight through, byte for byte.
	part := filepath.Join(dir, "part")
	pargs := append([]string{}, args...)
	pargs[5], pargs[7], pargs[len(pargs)-1] = filepath.Join(dir, "left", "f[0-2].png"), filepath.Join(dir, "right", "f[0-2].png"), part
	if code, stdout, stderr := runCmd(t, pargs...); code != 0 {
		t.Fatalf("three pairs: exit %d: %s %s", code, stdout, stderr)
	}
	rargs := []string{"stereo", "--series", "--resume", "--rig", rig, "--left", filepath.Join(dir, "left"), "--right", filepath.Join(dir, "right"),
		"--table", filepath.Join(dir, "loads.csv"), "--out", part}
	code, stdout, stderr = runCmd(t, rargs...)
	resumed, _ := os.ReadFile(filepath.Join(part, "curve.csv"))
	if code != 0 || !strings.Contains(stdout, "resuming after pair 2 of 3") || string(resumed) != string(csv) {
		t.Errorf("--resume: exit %d, %s %s; curve\n%s\nwant the straight run's\n%s", code, stdout, stderr, resumed, csv)
	}
	if code, _, stderr := runCmd(t, rargs...); code != 1 || !strings.Contains(stderr, "nothing left to add") {
		t.Errorf("--resume of a finished series: exit %d, %q; want exit 1 and nothing left to add", code, stderr)
	}
	if code, _, stderr := runCmd(t, append(rargs, "--step", "8")...); code != 2 || !strings.Contains(stderr, "--step with --resume") {
		t.Errorf("--resume with --step: exit %d, %q; want exit 2 naming --step", code, stderr)
	}
	os.Remove(filepath.Join(dir, "right", "f3.png"))
	bad := []struct {
		args []string
		code int
		want string
	}{
		{[]string{"stereo", "--series", "--rig", rig, "--left", filepath.Join(dir, "left"), "--right", filepath.Join(dir, "right")}, 1, "in pairs"},
		{[]string{"stereo", "--series", "--rig", rig, "--left", filepath.Join(dir, "left")}, 2, "--right"},
		{[]string{"stereo", "--series", "--rig", rig, "--left", filepath.Join(dir, "left", "f[0-2].png"), "--right", filepath.Join(dir, "right"), "--ext", "a:10,10,900,10"}, 1, "outside the 400×300"},
	}
	for _, c := range bad {
		code, _, stderr := runCmd(t, append(c.args, "--out", filepath.Join(dir, "bad"))...)
		if code != c.code || !strings.Contains(stderr, c.want) {
			t.Errorf("%v: exit %d, %q; want exit %d and %q", c.args[1:], code, stderr, c.code, c.want)
		}
	}
}

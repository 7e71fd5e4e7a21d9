package main

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/synth"
)

// TestTensileEndToEnd renders an invented tensile test with "mottle synth
// --test tensile" (demo data), runs the "mottle series" command it prints
// over the folder, and checks the reported properties against the truth
// in truth.json within the bounds of pkg/series's own rendered test:
// Young's modulus (least squares over the linear range, ASTM E111),
// Poisson's ratio (transverse against axial strain, ASTM E132) and the
// 0.2 % offset yield strength (ASTM E8/E8M, ISO 6892-1) within 1 %, the
// plastic strain ratio r = ε_width/ε_thickness (ISO 10113) within 2 %. The
// truth's Rp0.2 is the closed-form intersection of the offset line with
// the hardening branch (synth.TensileLaw.OffsetYield, worked by hand in
// pkg/synth's test); every frame's mean gauge strain E11 must also match
// the rendered truth within 1e-4.
func TestTensileEndToEnd(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "coupon")
	code, out, errs := runSynthArgs(t, "--test", "tensile", "--out", dir, "--size", "256x160", "--frames", "13",
		"--modulus", "70000", "--poisson", "0.33", "--yield", "280", "--hardening", "1200", "--r-value", "0.7", "--area", "12.5")
	if code != 0 {
		t.Fatalf("synth: exit %d: %s", code, errs)
	}
	if !strings.Contains(out, "INVENTED") {
		t.Errorf("synth output does not say the coupon is invented: %s", out)
	}
	var cmdLine []string
	for _, l := range strings.Split(out, "\n") {
		if rest, ok := strings.CutPrefix(strings.TrimSpace(l), "mottle series "); ok {
			cmdLine = strings.Fields(rest)
		}
	}
	if len(cmdLine) == 0 {
		t.Fatalf("synth printed no series command: %s", out)
	}
	res := filepath.Join(t.TempDir(), "res")
	for i := range cmdLine {
		if cmdLine[i] == "--out" && i+1 < len(cmdLine) {
			cmdLine[i+1] = res
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
	tt := tf.Tensile
	if tt == nil || !tt.Invented || len(tt.Frames) != 14 || len(tf.Frames) != 13 {
		t.Fatalf("truth.json tensile_test: %+v", tt)
	}
	if tt.Modulus != 70000 || tt.Poisson != 0.33 || tt.R != 0.7 || tt.Law.Area != 12.5 {
		t.Errorf("truth properties %+v do not hold the flags' law", tt)
	}
	// load.csv holds frame 0 (no load) to 13, load = stress × area.
	lb, err := os.ReadFile(filepath.Join(dir, "load.csv"))
	if err != nil {
		t.Fatal(err)
	}
	var rows [][]string
	for _, l := range strings.Split(strings.TrimSpace(string(lb)), "\n") {
		if !strings.HasPrefix(l, "#") {
			rows = append(rows, strings.Split(l, ","))
		}
	}
	if len(rows) != 15 || strings.Join(rows[0], ",") != "frame,time_s,load_N" {
		t.Fatalf("load.csv: %q", lb)
	}
	for i, r := range rows[1:] {
		load, _ := strconv.ParseFloat(r[2], 64)
		if want := tt.Frames[i].Stress * 12.5; math.Abs(load-want) > 1e-6*math.Max(1, want) || r[0] != strconv.Itoa(i) {
			t.Errorf("load.csv row %d: %v, want frame %d load %g", i+1, r, i, want)
		}
	}

	var stdout, stderr bytes.Buffer
	if code := run(context.Background(), &env{stdout: &stdout, stderr: &stderr}, append([]string{"series"}, cmdLine...)); code != 0 {
		t.Fatalf("mottle series %s: exit %d: %s", strings.Join(cmdLine, " "), code, stderr.String())
	}
	t.Logf("mottle series output:\n%s", stdout.String())

	var curve struct {
		Rows []struct {
			Index  int `json:"index"`
			Gauges []struct {
				Component string  `json:"component"`
				Mean      float64 `json:"mean"`
			} `json:"gauges"`
		} `json:"rows"`
		Properties struct {
			Modulus *struct {
				E float64 `json:"E"`
			} `json:"youngs_modulus"`
			Poisson *struct {
				Nu float64 `json:"nu"`
			} `json:"poissons_ratio"`
			Yield *struct {
				Stress float64 `json:"stress"`
			} `json:"offset_yield"`
			R *struct {
				R float64 `json:"r"`
			} `json:"r_value"`
		} `json:"properties"`
	}
	cb, err := os.ReadFile(filepath.Join(res, "curve.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(cb, &curve); err != nil {
		t.Fatal(err)
	}
	pr := curve.Properties
	if pr.Modulus == nil || pr.Poisson == nil || pr.Yield == nil || pr.R == nil {
		t.Fatalf("properties missing from curve.json: %s", stdout.String())
	}
	rel := func(name string, got, want, tol float64) {
		t.Logf("%s = %.6g, truth %.6g (%+.3f %%)", name, got, want, 100*(got-want)/want)
		if math.Abs(got-want) > tol*math.Abs(want) {
			t.Errorf("%s = %.6g, truth %.6g: off by more than %g %%", name, got, want, 100*tol)
		}
	}
	rel("E", pr.Modulus.E, tt.Modulus, 0.01)
	rel("nu", pr.Poisson.Nu, tt.Poisson, 0.01)
	rel("Rp0.2", pr.Yield.Stress, tt.OffsetYield, 0.01)
	rel("r", pr.R.R, tt.R, 0.02)

	if len(curve.Rows) != len(tt.Frames) {
		t.Fatalf("curve has %d rows, truth %d frames", len(curve.Rows), len(tt.Frames))
	}
	worst := 0.0
	for i, r := range curve.Rows {
		for _, g := range r.Gauges {
			if g.Component == "E11" {
				worst = math.Max(worst, math.Abs(g.Mean-tt.Frames[i].E11))
			}
		}
	}
	t.Logf("largest gauge E11 error over the frames: %.2e", worst)
	if worst > 1e-4 {
		t.Errorf("gauge E11 differs from the truth by up to %.2e, want ≤ 1e-4", worst)
	}
}

// TestTensileUsage: tensile flags without --test tensile, a motion with
// it, an unknown test and an impossible law are usage errors that say what
// would work.
func TestTensileUsage(t *testing.T) {
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"--modulus", "200000"}, "--modulus belongs to --test tensile"},
		{[]string{"--test", "tensile", "--motion", "translation:u=1"}, "leave out --motion"},
		{[]string{"--test", "bend"}, "the one test is tensile"},
		{[]string{"--test", "tensile", "--hardening", "20000"}, "below E"},
		{[]string{"--test", "tensile", "--max-strain", "0.005"}, "yield strain"},
		{[]string{"--test", "tensile", "--frames", "1"}, "at least 2"},
		{[]string{"--test", "tensile", "--frames", "0"}, "at least 2"},
	} {
		code, _, errs := runSynthArgs(t, append(c.args, "--out", t.TempDir())...)
		if code != 2 || !strings.Contains(errs, c.want) {
			t.Errorf("synth %v: exit %d, stderr %q; want exit 2 and %q", c.args, code, errs, c.want)
		}
	}
}

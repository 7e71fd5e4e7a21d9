package main

import (
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/series"
)

// TestSeriesCommand renders a four-frame uniaxial series with the synth
// command (demo data), then runs the series command over the folder with a
// load table, extensometers, a gauge and properties, and checks the files
// and that the last extensometer reading matches the rendered stretch.
func TestSeriesCommand(t *testing.T) {
	dir := t.TempDir()
	if code, _, errs := runSynthArgs(t, "--out", dir, "--size", "128x96", "--motion", "affine:F11=1.02,F22=0.994",
		"--frames", "4", "--full-load", "600", "--bits", "16"); code != 0 {
		t.Fatalf("synth: exit %d: %s", code, errs)
	}
	csv := "frame,time_s,load_N\n0,0,0\n1,1,150\n2,2,300\n3,3,450\n4,4,600\n"
	if err := os.WriteFile(filepath.Join(dir, "loads.csv"), []byte(csv), 0o644); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(t.TempDir(), "res")
	args := []string{"series", "--out", out, "--subset", "21", "--step", "8", "--table", filepath.Join(dir, "loads.csv"),
		"--ext", "axial:24,48,104,48", "--ext", "width:64,20,64,76", "--gauge", "mid:40,30,88,66",
		"--area", "10", "--transverse", "width", "--modulus-range", "0.001,0.03",
		"--ref", filepath.Join(dir, "reference.png"), filepath.Join(dir, "frame_*.png")}
	var stdout, stderr bytes.Buffer
	if code := run(context.Background(), &env{stdout: &stdout, stderr: &stderr}, args); code != 0 {
		t.Fatalf("series: exit %d: %s", code, stderr.String())
	}
	if !strings.Contains(stdout.String(), "4 frames") || !strings.Contains(stdout.String(), "Young's modulus") {
		t.Errorf("stdout: %s", stdout.String())
	}
	for _, f := range []string{"report.html", "curve.csv", "curve.json", "state.json", "plots/stress_strain.png",
		"frames/0004/field.npz", "frames/0004/map_E11.png"} {
		if _, err := os.Stat(filepath.Join(out, f)); err != nil {
			t.Error(err)
		}
	}
	var st series.State
	b, err := os.ReadFile(filepath.Join(out, "state.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &st); err != nil {
		t.Fatal(err)
	}
	last := st.Curve[len(st.Curve)-1]
	if math.Abs(last.Extensometers[0].Stretch-1.02) > 2e-4 || math.Abs(last.Extensometers[1].Stretch-0.994) > 2e-4 {
		t.Errorf("last stretches %g, %g; rendered 1.02, 0.994", last.Extensometers[0].Stretch, last.Extensometers[1].Stretch)
	}
	if last.Stress == nil || *last.Stress != 60 {
		t.Errorf("last stress %v, want 600 N / 10 mm² = 60 MPa", last.Stress)
	}

	// A cancelled run stops cleanly, keeps what it has and says how to go on.
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	out2 := filepath.Join(t.TempDir(), "res")
	args[2] = out2
	stderr.Reset()
	if code := run(ctx, &env{stdout: &stdout, stderr: &stderr}, args); code != 1 || !strings.Contains(stderr.String(), "--resume") {
		t.Errorf("cancelled run: exit %d, stderr %q", code, stderr.String())
	}
	if _, err := os.Stat(filepath.Join(out2, "report.html")); err != nil {
		t.Error(err)
	}
	// --resume continues and finishes.
	stderr.Reset()
	if code := run(context.Background(), &env{stdout: &stdout, stderr: &stderr}, append(args[:1:1], append([]string{"--resume"}, args[1:]...)...)); code != 0 {
		t.Errorf("resume: exit %d: %s", code, stderr.String())
	}
}

func TestSeriesCommandUsage(t *testing.T) {
	var stdout, stderr bytes.Buffer
	if code := run(context.Background(), &env{stdout: &stdout, stderr: &stderr}, []string{"series", "--ext", "bad", "a.png", "b.png"}); code != 2 {
		t.Errorf("bad --ext: exit %d, want 2 (%s)", code, stderr.String())
	}
	if code := run(context.Background(), &env{stdout: &stdout, stderr: &stderr}, []string{"series", "one.png"}); code != 2 {
		t.Errorf("one frame: exit %d, want 2", code)
	}
}

// TestSeriesCommandMask runs the series command with a mask image that
// leaves out the bottom of the frame: the state keeps the mask, no point
// whose subset reaches into the masked rows is measured, and the gauge
// above them still reads the rendered stretch.
func TestSeriesCommandMask(t *testing.T) {
	dir := t.TempDir()
	if code, _, errs := runSynthArgs(t, "--out", dir, "--size", "128x96", "--motion", "affine:F11=1.02,F22=0.994",
		"--frames", "2", "--bits", "8"); code != 0 {
		t.Fatalf("synth: exit %d: %s", code, errs)
	}
	m := imageio.NewGray(128, 96)
	for y := range 60 {
		for x := range 128 {
			m.Pix[y*m.Stride+x] = 255
		}
	}
	maskPath := filepath.Join(dir, "mask.png")
	if err := imageio.WriteFile(maskPath, m, 8); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(t.TempDir(), "res")
	args := []string{"series", "--out", out, "--subset", "21", "--step", "8", "--mask", maskPath,
		"--gauge", "top:30,20,98,40", "--ref", filepath.Join(dir, "reference.png"), filepath.Join(dir, "frame_*.png")}
	var stdout, stderr bytes.Buffer
	if code := run(context.Background(), &env{stdout: &stdout, stderr: &stderr}, args); code != 0 {
		t.Fatalf("series: exit %d: %s", code, stderr.String())
	}
	b, err := os.ReadFile(filepath.Join(out, "state.json"))
	if err != nil {
		t.Fatal(err)
	}
	var st series.State
	if err := json.Unmarshal(b, &st); err != nil {
		t.Fatal(err)
	}
	if st.Mask == nil {
		t.Fatal("state.json holds no mask")
	}
	for k, q := range st.Points {
		if Y := st.Grid.Y0 + float64(k/st.Grid.Nx)*st.Grid.Step; q.Valid && Y+10 > 59.5 {
			t.Fatalf("point %d at Y = %g measured although its subset reaches the masked rows", k, Y)
		}
	}
	last := st.Curve[len(st.Curve)-1]
	// E11 of F11 = 1.02 is ½(1.02² − 1) = 0.0202 (Green–Lagrange).
	if g := last.Gauges[0]; g.N == 0 || math.Abs(g.Mean-0.0202) > 2e-4 {
		t.Errorf("gauge %s %s = %g over %d points, want 0.0202", g.Gauge, g.Component, g.Mean, g.N)
	}
}

// TestSeriesCommandLive runs the series of TestSeriesCommand with --live:
// stdout holds a CSV header and one line per frame, in order, each with the
// extensometer strain (the rendered 2 % stretch scaled by the frame's
// load, within 5e-4, the two-point tolerance of the series tests), and the
// folder's curve.csv is the one a run without --live writes.
func TestSeriesCommandLive(t *testing.T) {
	dir := t.TempDir()
	if code, _, errs := runSynthArgs(t, "--out", dir, "--size", "128x96", "--motion", "affine:F11=1.02,F22=0.994",
		"--frames", "4", "--full-load", "600", "--bits", "16"); code != 0 {
		t.Fatalf("synth: exit %d: %s", code, errs)
	}
	csvText := "frame,time_s,load_N\n0,0,0\n1,1,150\n2,2,300\n3,3,450\n4,4,600\n"
	if err := os.WriteFile(filepath.Join(dir, "loads.csv"), []byte(csvText), 0o644); err != nil {
		t.Fatal(err)
	}
	curves := map[bool]string{}
	for _, live := range []bool{false, true} {
		out := filepath.Join(t.TempDir(), "res")
		args := []string{"series", "--out", out, "--subset", "21", "--step", "8", "--table", filepath.Join(dir, "loads.csv"),
			"--ext", "axial:24,48,104,48", "--gauge", "mid:40,30,88,66",
			"--ref", filepath.Join(dir, "reference.png"), filepath.Join(dir, "frame_*.png")}
		if live {
			args = append(args[:1], append([]string{"--live"}, args[1:]...)...)
		}
		var stdout, stderr bytes.Buffer
		if code := run(context.Background(), &env{stdout: &stdout, stderr: &stderr}, args); code != 0 {
			t.Fatalf("series (live %v): exit %d: %s", live, code, stderr.String())
		}
		b, err := os.ReadFile(filepath.Join(out, "curve.csv"))
		if err != nil {
			t.Fatal(err)
		}
		curves[live] = string(b)
		if !live {
			continue
		}
		recs, err := csv.NewReader(&stdout).ReadAll()
		if err != nil || len(recs) != 5 {
			t.Fatalf("live stdout: %v, %d lines, want a header and 4:\n%s", err, len(recs), stdout.String())
		}
		if recs[0][0] != "index" || recs[0][5] != "ext_axial_eng" {
			t.Errorf("live header %v", recs[0])
		}
		for n, r := range recs[1:] {
			e, err := strconv.ParseFloat(r[5], 64)
			want := 0.02 * float64(n+1) / 4
			if r[0] != strconv.Itoa(n+1) || r[4] != "true" || err != nil || math.Abs(e-want) > 5e-4 {
				t.Errorf("live line %d: %v; want index %d, trusted, ext_axial_eng %.4f", n+1, r, n+1, want)
			}
		}
		if !strings.Contains(stderr.String(), "4 frames") {
			t.Errorf("live stderr lacks the summary: %s", stderr.String())
		}
	}
	if curves[true] != curves[false] {
		t.Errorf("curve.csv with --live differs from the normal run's:\n%s\nvs\n%s", curves[true], curves[false])
	}
}

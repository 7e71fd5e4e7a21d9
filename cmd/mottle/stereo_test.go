package main

import (
	"bytes"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/mottledic/mottle/internal/stereobench"
	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

type tenth struct{ p *synth.Pattern }

func (s tenth) Value(X, Y float64) float64 { return s.p.Value(10*X, 10*Y) }

// benchRigFile writes the exact rig of synth.BenchRig(w, h) as a rig file (stereobench.RigFile).
func benchRigFile(t *testing.T, dir string, w, h int) string {
	t.Helper()
	rig, err := stereobench.RigFile(w, h)
	if err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(dir, "rig.json")
	if err := os.WriteFile(p, rig, 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// TestStereoCommand runs mottle stereo on a small rendered bench scene (a
// plane moved 1 mm toward the cameras, 400×300 px): the results folder
// holds the field in JSON, CSV and VTS (points at the 3D positions), the
// out-of-plane displacement is 1 mm, and bad input is refused with a
// message.
func TestStereoCommand(t *testing.T) {
	const w, h = 400, 300
	dir := t.TempDir()
	rig := benchRigFile(t, dir, w, h)
	p, err := synth.NewPattern(synth.PatternOptions{Diameter: 11, Seed: 4, Bounds: synth.Rect{X0: -750, Y0: -600, X1: 750, Y1: 600}})
	if err != nil {
		t.Fatal(err)
	}
	lc, rc := synth.BenchRig(w, h)
	var names []string
	for k, pl := range []synth.Placement{{Shape: synth.Plane{}}, {Shape: synth.Plane{}, Pose: synth.Pose{T: [3]float64{0, 0, 1}}}} {
		for s, c := range []synth.Cam{lc, rc} {
			g, _, err := synth.RenderSurface(tenth{p}, pl, c, synth.RenderOptions{W: w, H: h, Supersample: 2, Noise: 0.5, Seed: int64(2*k + s)})
			if err != nil {
				t.Fatal(err)
			}
			n := filepath.Join(dir, []string{"L", "R"}[s]+[]string{"0", "1"}[k]+".png")
			f, _ := os.Create(n)
			if err := imageio.WritePNG(f, g, 8); err != nil {
				t.Fatal(err)
			}
			f.Close()
			names = append(names, n)
		}
	}
	out := filepath.Join(dir, "run")
	code, stdout, stderr := runCmd(t, "stereo", "--rig", rig, names[0], names[1], names[2], names[3], "--step", "12", "--out", out)
	if code != 0 {
		t.Fatalf("exit %d: %s %s", code, stdout, stderr)
	}
	t.Log(stdout)
	b, err := os.ReadFile(filepath.Join(out, "field.json"))
	if err != nil {
		t.Fatal(err)
	}
	f, err := field.ReadJSON(bytes.NewReader(b))
	if err != nil {
		t.Fatal(err)
	}
	s, err := f.Summary("w")
	if err != nil || s.Count < 100 || math.Abs(s.Mean-1) > 0.01 {
		t.Errorf("w: %+v, %v: want about 1 mm over 100+ points", s, err)
	}
	// The plane is flat: the scatter of z is the measurement noise, which
	// the propagated std_z_mm must predict (within a factor of 2).
	zs, _ := f.Summary("z_mm")
	sz, _ := f.Summary("std_z_mm")
	if !(zs.Std < 2*sz.Mean && zs.Std > sz.Mean/2) {
		t.Errorf("shape scatter %.4f mm against the predicted std %.4f mm: want within a factor of 2", zs.Std, sz.Mean)
	}
	vts, err := os.ReadFile(filepath.Join(out, "field.vts"))
	if err != nil || !bytes.Contains(vts, []byte(`Name="vtkGhostType"`)) {
		t.Errorf("field.vts: %v; want the 3D surface with hidden points flagged", err)
	}
	csv, err := os.ReadFile(filepath.Join(out, "field.csv"))
	if err != nil || !bytes.Contains(csv, []byte("z_mm")) {
		t.Errorf("field.csv: %v; want a z_mm column", err)
	}
	bad := []struct {
		args []string
		code int
		want string
	}{
		{[]string{"stereo", "--rig", rig, names[0], names[1], names[2]}, 2, "give 2 images"},
		{[]string{"stereo", names[0], names[1]}, 2, "--rig FILE is required"},
		{[]string{"stereo", "--rig", names[0], names[0], names[1]}, 1, "not a rig file"},
		{[]string{"stereo", "--rig", benchRigFile(t, t.TempDir(), 640, 480), names[0], names[1]}, 1, "calibrated on 640×480"},
	}
	for _, c := range bad {
		code, _, stderr := runCmd(t, append(c.args, "--out", filepath.Join(dir, "bad"))...)
		if code != c.code || !strings.Contains(stderr, c.want) {
			t.Errorf("%v: exit %d, %q; want exit %d and %q", c.args, code, stderr, c.code, c.want)
		}
	}
}

// TestCalibrateStereoCommand renders six simultaneous pairs of a
// checkerboard seen by the bench at 400×300 px, calibrates the rig with
// mottle calibrate --stereo (left images after --stereo, right after
// --right, flags between and after them) and checks the rig file: the
// bench's 25° between the axes and its 216.4 mm baseline.
func TestCalibrateStereoCommand(t *testing.T) {
	const w, h = 400, 300
	dir := t.TempDir()
	tg, err := calib.NewTarget(calib.Checkerboard, 9, 7, 7)
	if err != nil {
		t.Fatal(err)
	}
	var tb bytes.Buffer
	if err := tg.Write(&tb); err != nil {
		t.Fatal(err)
	}
	tfile := filepath.Join(dir, "board.json")
	os.WriteFile(tfile, tb.Bytes(), 0o644)
	surf := synth.Checkerboard{Cols: 9, Rows: 7, Square: 7, Edge: 0.5, Markers: tg.Marker[:], MarkerDiameter: tg.MarkerDiameter}
	lc, rc := synth.BenchRig(w, h)
	var left, right []string
	for k := range 6 {
		a := 2*math.Pi*float64(k)/6 + 0.4
		tilt := (14 + 10*float64(k%2)) * math.Pi / 180
		p := synth.PoseFromAngles(tilt*math.Cos(a), tilt*math.Sin(a), 0.2*math.Sin(float64(k)), [3]float64{})
		for i := range 3 { // the sheet turned over to face the bench (+z)
			p.R[i][1], p.R[i][2] = -p.R[i][1], -p.R[i][2]
		}
		for i := range 3 {
			p.T[i] = -(p.R[i][0]*31.5 + p.R[i][1]*24.5)
		}
		for s, c := range []synth.Cam{lc, rc} {
			g, _, err := synth.RenderSurface(surf, synth.Placement{Shape: synth.Plane{}, Pose: p}, c,
				synth.RenderOptions{W: w, H: h, Supersample: 2, Blur: 0.6, Noise: 1, Seed: int64(2*k + s)})
			if err != nil {
				t.Fatal(err)
			}
			f := filepath.Join(dir, []string{"L", "R"}[s]+string(rune('0'+k))+".png")
			if err := imageio.WriteFile(f, g, 8); err != nil {
				t.Fatal(err)
			}
			if s == 0 {
				left = append(left, f)
			} else {
				right = append(right, f)
			}
		}
	}
	out := filepath.Join(dir, "rig.json")
	args := append(append(append([]string{"calibrate", "--target", tfile, "--stereo"}, left...), "--right"), right...)
	args = append(args, "--fix-k3", "--out", out)
	code, stdout, stderr := runCmd(t, args...)
	if code != 0 {
		t.Fatalf("calibrate --stereo: exit %d: %s", code, stderr)
	}
	t.Log(stdout)
	f, err := calib.ReadRigFile(out)
	if err != nil {
		t.Fatal(err)
	}
	if len(f.Views) != 6 || math.Abs(f.Angle-25) > 0.3 || math.Abs(f.Baseline-216.44) > 2 {
		t.Errorf("rig file: %d views, angle %.3f°, baseline %.3f mm; want 6, 25°, 216.4 mm", len(f.Views), f.Angle, f.Baseline)
	}
	code, _, stderr = runCmd(t, "calibrate", "--target", tfile, "--stereo", left[0], left[1])
	if code != 2 || !strings.Contains(stderr, "--right") {
		t.Errorf("no right images: exit %d, %q", code, stderr)
	}
}

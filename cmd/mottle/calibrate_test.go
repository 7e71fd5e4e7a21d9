package main

import (
	"bytes"
	"context"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

func runCmd(t *testing.T, args ...string) (code int, stdout, stderr string) {
	t.Helper()
	var o, e bytes.Buffer
	code = run(context.Background(), &env{stdout: &o, stderr: &e}, args)
	return code, o.String(), e.String()
}

// TestTargetAndPattern: mottle target writes the PNG (with its print
// resolution), the SVG and a geometry file that reads back; mottle pattern
// writes a PNG with its resolution and refuses speckles finer than the
// printer.
func TestTargetAndPattern(t *testing.T) {
	dir := t.TempDir()
	for _, kind := range []string{"checkerboard", "dots"} {
		prefix := filepath.Join(dir, kind)
		code, out, errs := runCmd(t, "target", "--kind", kind, "--cols", "7", "--rows", "6", "--pitch", "8", "--dpi", "150", "--out", prefix)
		if code != 0 {
			t.Fatalf("target %s: exit %d: %s", kind, code, errs)
		}
		tg, err := calib.ReadTarget(prefix + ".json")
		if err != nil {
			t.Fatal(err)
		}
		if string(tg.Kind) != kind || tg.Cols != 7 || tg.Pitch != 8 {
			t.Errorf("%s: read back %+v", kind, tg)
		}
		b, err := os.ReadFile(prefix + ".png")
		if err != nil {
			t.Fatal(err)
		}
		if dpi, err := imageio.PNGDPI(b); err != nil || math.Abs(dpi-150) > 0.1 {
			t.Errorf("%s.png: resolution %g dpi, %v; want 150", kind, dpi, err)
		}
		g, err := imageio.ReadFile(prefix+".png", imageio.DefaultLimits())
		if err != nil {
			t.Fatal(err)
		}
		w, h := tg.Size()
		if math.Abs(float64(g.W)-w/25.4*150) > 1 || math.Abs(float64(g.H)-h/25.4*150) > 1 {
			t.Errorf("%s.png is %d×%d px for a %g×%g mm sheet at 150 dpi", kind, g.W, g.H, w, h)
		}
		svg, _ := os.ReadFile(prefix + ".svg")
		if !bytes.Contains(svg, []byte(fmt.Sprintf(`width="%gmm"`, w))) {
			t.Errorf("%s.svg does not give its width in mm", kind)
		}
		if !strings.Contains(out, "target points") {
			t.Errorf("target output: %q", out)
		}
	}
	pat := filepath.Join(dir, "p.png")
	if code, _, errs := runCmd(t, "pattern", "--speckle", "0.4", "--width", "20", "--height", "10", "--dpi", "300", "--out", pat); code != 0 {
		t.Fatalf("pattern: exit %d: %s", code, errs)
	}
	b, _ := os.ReadFile(pat)
	if dpi, err := imageio.PNGDPI(b); err != nil || math.Abs(dpi-300) > 0.1 {
		t.Errorf("pattern png: %g dpi, %v", dpi, err)
	}
	g, err := imageio.ReadFile(pat, imageio.DefaultLimits())
	if err != nil {
		t.Fatal(err)
	}
	// About half the sheet is speckle (coverage 0.5): mean grey near 127.
	if mean, _, _, _ := imageio.Stats(g); math.Abs(mean-127.5) > 20 {
		t.Errorf("pattern mean grey %.1f, want about half of 255", mean)
	}
	code, _, errs := runCmd(t, "pattern", "--speckle", "0.1", "--dpi", "300", "--out", pat)
	if code != 2 || !strings.Contains(errs, "higher --dpi") {
		t.Errorf("too fine speckle: exit %d, %q", code, errs)
	}
}

// TestCalibrateCommand renders views of a target through synth's exact
// camera, calibrates them with mottle calibrate, and checks the file; then
// the errors for images of different sizes and too few views.
func TestCalibrateCommand(t *testing.T) {
	dir := t.TempDir()
	tg, err := calib.NewTarget(calib.Checkerboard, 9, 7, 10)
	if err != nil {
		t.Fatal(err)
	}
	var tb bytes.Buffer
	if err := tg.Write(&tb); err != nil {
		t.Fatal(err)
	}
	tfile := filepath.Join(dir, "board.json")
	os.WriteFile(tfile, tb.Bytes(), 0o644)
	lens := synth.Lens{Fx: 420, Fy: 421, Cx: 161, Cy: 119.5, K1: -0.1}
	surf := synth.Checkerboard{Cols: 9, Rows: 7, Square: 10, Edge: 0.4, Markers: tg.Marker[:], MarkerDiameter: tg.MarkerDiameter}
	var files []string
	for k := range 8 {
		a := 2 * math.Pi * float64(k) / 8
		tilt := (18 + 8*float64(k%2)) * math.Pi / 180
		p := synth.PoseFromAngles(tilt*math.Cos(a), tilt*math.Sin(a), 0.2*math.Sin(float64(k)), [3]float64{})
		for i := range 3 {
			p.T[i] = []float64{0, 0, 190}[i] - (p.R[i][0]*45 + p.R[i][1]*35)
		}
		g, _, err := synth.RenderView(surf, synth.View{Lens: lens, Pose: p}, synth.RenderOptions{W: 320, H: 240, Supersample: 2, Blur: 0.6, Noise: 1, Seed: int64(k)})
		if err != nil {
			t.Fatal(err)
		}
		f := filepath.Join(dir, fmt.Sprintf("cal%d.png", k))
		if err := imageio.WriteFile(f, g, 8); err != nil {
			t.Fatal(err)
		}
		files = append(files, f)
	}
	out := filepath.Join(dir, "camera.json")
	args := append([]string{"calibrate", "--target", tfile, "--out", out, "--plane", files[2], "--fix-k3"}, files...)
	code, stdout, stderr := runCmd(t, args...)
	if code != 0 {
		t.Fatalf("calibrate: exit %d: %s", code, stderr)
	}
	f, err := calib.ReadFile(out)
	if err != nil {
		t.Fatal(err)
	}
	if f.Plane == nil || f.Plane.Image != files[2] || len(f.Views) != 8 {
		t.Errorf("file: plane %v, %d views", f.Plane, len(f.Views))
	}
	// Loose bounds: 8 small views (the accuracy bounds are tested in pkg/calib).
	if math.Abs(f.Camera.Fx-lens.Fx) > 0.005*lens.Fx || math.Abs(f.Camera.K1-lens.K1) > 0.05*math.Abs(lens.K1) || f.RMS > 0.05 {
		t.Errorf("calibration fx %.3f (true %g), k1 %.4f (true %g), RMS %.4f", f.Camera.Fx, lens.Fx, f.Camera.K1, lens.K1, f.RMS)
	}
	if !strings.Contains(stdout, "reprojection RMS") || !strings.Contains(stdout, "cal0.png") {
		t.Errorf("summary: %s", stdout)
	}
	// Bad input.
	small := filepath.Join(dir, "small.png")
	imageio.WriteFile(small, imageio.NewGray(200, 150), 8)
	code, _, stderr = runCmd(t, "calibrate", "--target", tfile, files[0], files[1], small)
	if code != 1 || !strings.Contains(stderr, "small.png is 200×150 px") {
		t.Errorf("mixed sizes: exit %d, %q", code, stderr)
	}
	code, _, stderr = runCmd(t, "calibrate", "--target", tfile, "--out", filepath.Join(dir, "x.json"), files[0], files[1])
	if code != 1 || !strings.Contains(stderr, "at least 3") {
		t.Errorf("two views: exit %d, %q", code, stderr)
	}
	code, _, stderr = runCmd(t, "calibrate", files[0])
	if code != 2 || !strings.Contains(stderr, "--target") {
		t.Errorf("no target: exit %d, %q", code, stderr)
	}
}

// TestAnalyzeAndSeriesWithCalibration: --calibration on analyze and series
// puts lengths in mm in the specimen plane (here a distortion-free camera
// at 0.2 mm per px), says so, and refuses to be combined with a scale.
func TestAnalyzeAndSeriesWithCalibration(t *testing.T) {
	dir := t.TempDir()
	const w, h = 128, 96
	pat, err := synth.NewPattern(synth.PatternOptions{Diameter: 4, Seed: 5, Bounds: synth.ImageRect(w, h, 16)})
	if err != nil {
		t.Fatal(err)
	}
	var files []string
	for k, e := range []float64{0, 0.01, 0.02} {
		g, _, err := synth.Render(pat, synth.Affine{F: [2][2]float64{{1 + e, 0}, {0, 1}}, CX: 64, CY: 48}, synth.RenderOptions{W: w, H: h, Bits: 8})
		if err != nil {
			t.Fatal(err)
		}
		f := filepath.Join(dir, fmt.Sprintf("f%d.png", k))
		if err := imageio.WriteFile(f, g, 8); err != nil {
			t.Fatal(err)
		}
		files = append(files, f)
	}
	cal := &calib.File{Format: calib.FileFormat, Image: [2]int{w, h},
		Camera: calib.Params{Fx: 500, Fy: 500, Cx: 63.5, Cy: 47.5},
		Plane:  &calib.Plane{Image: "plane.png", Pose: calib.Pose{T: [3]float64{0, 0, 100}}}}
	var b bytes.Buffer
	if err := cal.Write(&b); err != nil {
		t.Fatal(err)
	}
	cfile := filepath.Join(dir, "camera.json")
	os.WriteFile(cfile, b.Bytes(), 0o644)
	code, out, errs := runCmd(t, "analyze", "--ref", files[0], "--def", files[1], "--subset", "21", "--calibration", cfile, "--out", filepath.Join(dir, "a"))
	if code != 0 {
		t.Fatalf("analyze: exit %d: %s", code, errs)
	}
	if !strings.Contains(out, "corrected with the calibration camera.json") || !strings.Contains(out, "lengths in mm") {
		t.Errorf("analyze summary does not say the calibration was used:\n%s", out)
	}
	code, _, errs = runCmd(t, "analyze", "--ref", files[0], "--def", files[1], "--calibration", cfile, "--mm-per-px", "0.1", "--out", filepath.Join(dir, "b"))
	if code == 0 || !strings.Contains(errs, "calibration") || !strings.Contains(errs, "mm_per_px") {
		t.Errorf("calibration with a scale: exit %d, %q", code, errs)
	}
	code, _, errs = runCmd(t, "analyze", "--ref", files[0], "--def", files[1], "--calibration", filepath.Join(dir, "missing.json"), "--out", filepath.Join(dir, "c"))
	if code == 0 || !strings.Contains(errs, "missing.json") {
		t.Errorf("missing calibration: exit %d, %q", code, errs)
	}
	sdir := filepath.Join(dir, "s")
	code, _, errs = runCmd(t, append([]string{"series", "--subset", "21", "--calibration", cfile, "--ext", "ax:24,48,104,48", "--out", sdir}, files...)...)
	if code != 0 {
		t.Fatalf("series: exit %d: %s", code, errs)
	}
	st, err := os.ReadFile(filepath.Join(sdir, "state.json"))
	if err != nil || !strings.Contains(string(st), `"calibration_name":"camera.json"`) && !strings.Contains(string(st), `"calibration_name": "camera.json"`) {
		t.Errorf("series state does not record the calibration (%v)", err)
	}
}

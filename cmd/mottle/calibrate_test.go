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

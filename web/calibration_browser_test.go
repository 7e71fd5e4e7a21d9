package web_test

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"

	"github.com/chromedp/chromedp"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// checkCalibration renders 8 views of a checkerboard through synth's exact
// camera, calibrates them from the page's calibration section, and checks
// that the summary, the per-view error plot and the distortion plot are
// drawn, and that the page's distortion formula gives the model's values
// (Brown 1966, as pkg/calib computes them).
func checkCalibration(b *browser) {
	b.t.Helper()
	dir := b.t.TempDir()
	tg, err := calib.NewTarget(calib.Checkerboard, 9, 7, 10)
	if err != nil {
		b.t.Fatal(err)
	}
	var tb bytes.Buffer
	if err := tg.Write(&tb); err != nil {
		b.t.Fatal(err)
	}
	tpath := filepath.Join(dir, "board.json")
	if err := os.WriteFile(tpath, tb.Bytes(), 0o644); err != nil {
		b.t.Fatal(err)
	}
	lens := synth.Lens{Fx: 420, Fy: 421, Cx: 161, Cy: 119.5, K1: -0.1}
	surf := synth.Checkerboard{Cols: 9, Rows: 7, Square: 10, Edge: 0.4, Markers: tg.Marker[:], MarkerDiameter: tg.MarkerDiameter}
	var imgs []string
	for k := range 8 {
		a := 2 * math.Pi * float64(k) / 8
		tilt := (18 + 8*float64(k%2)) * math.Pi / 180
		p := synth.PoseFromAngles(tilt*math.Cos(a), tilt*math.Sin(a), 0.2*math.Sin(float64(k)), [3]float64{})
		for i := range 3 {
			p.T[i] = []float64{0, 0, 190}[i] - (p.R[i][0]*45 + p.R[i][1]*35)
		}
		g, _, err := synth.RenderView(surf, synth.View{Lens: lens, Pose: p}, synth.RenderOptions{W: 320, H: 240, Supersample: 2, Blur: 0.6, Noise: 1, Seed: int64(k)})
		if err != nil {
			b.t.Fatal(err)
		}
		f := filepath.Join(dir, fmt.Sprintf("view%d.png", k))
		if err := imageio.WriteFile(f, g, 8); err != nil {
			b.t.Fatal(err)
		}
		imgs = append(imgs, f)
	}
	b.run("choose the target and the images",
		chromedp.SetUploadFiles(chromedp.ID("cal-target"), []string{tpath}),
		chromedp.SetUploadFiles(chromedp.ID("cal-images"), imgs),
		setValue("#cal-plane", "view2.png"))
	b.run("calibrate", b.click("#cal-run"))
	b.wait(`document.getElementById("cal-status").textContent === "done"`, "the calibration did not finish")
	sum := b.text("#cal-summary")
	if !strings.Contains(sum, "8 views") || !strings.Contains(sum, "view2.png") {
		b.t.Errorf("calibration summary %q does not name the 8 views and the plane image", sum)
	}
	for _, c := range []string{"cal-residuals", "cal-distortion"} {
		if n := b.number(fmt.Sprintf(`distinctColours(document.getElementById(%q))`, c)); n < 3 {
			b.t.Errorf("%s has %v colours, want a drawn plot", c, n)
		}
	}
	b.shot("calibration.png", "#calibration")
	// The page's distortion against the model's, with the fitted camera.
	var f calib.File
	if err := json.Unmarshal([]byte(b.str(`JSON.stringify(mottleCalibration.file)`)), &f); err != nil {
		b.t.Fatal(err)
	}
	cam := f.Camera.Camera()
	for _, p := range [][2]float64{{0, 0}, {319, 239}, {40, 200}} {
		xn, yn := (p[0]-cam.Cx)/cam.Fx, (p[1]-cam.Cy)/cam.Fy
		xd, yd := cam.Distort(xn, yn)
		wx, wy := cam.Fx*(xd-xn), cam.Fy*(yd-yn)
		gx := b.number(fmt.Sprintf(`mottleCalibration.distortion(mottleCalibration.file.camera, %g, %g)[0]`, p[0], p[1]))
		gy := b.number(fmt.Sprintf(`mottleCalibration.distortion(mottleCalibration.file.camera, %g, %g)[1]`, p[0], p[1]))
		if math.Hypot(gx-wx, gy-wy) > 1e-9 {
			b.t.Errorf("page distortion at %v = (%g, %g), model (%g, %g)", p, gx, gy, wx, wy)
		}
	}
}

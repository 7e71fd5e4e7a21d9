package web_test

import (
	"fmt"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"strings"

	"github.com/chromedp/chromedp"

	"github.com/mottledic/mottle/internal/stereobench"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

type tenthMM struct{ p *synth.Pattern }

func (s tenthMM) Value(X, Y float64) float64 { return s.p.Value(10*X, 10*Y) }

// writeRig writes the exact rig of synth.BenchRig(w, h) as a rig file.
func writeRig(b *browser, path string, w, h int) {
	rig, err := stereobench.RigFile(w, h)
	if err != nil {
		b.t.Fatal(err)
	}
	if err := os.WriteFile(path, rig, 0o644); err != nil {
		b.t.Fatal(err)
	}
}

// stereoAllowed are the failed requests checkStereo causes on purpose.
var stereoAllowed = []allowance{
	{regexp.MustCompile(`^request POST \S+/v1/stereo(\?wait=true)?: 422 `),
		"checkStereo sends a rig calibrated on other images: the service answers 422 with a problem document, which the page shows"},
	{regexp.MustCompile(`^console error \(network\): Failed to load resource: the server responded with a status of 422 \(Unprocessable Entity\) \S+/v1/stereo(\?wait=true)?$`),
		"Chromium logs the 422 answer of checkStereo as a failed resource"},
}

// checkStereo renders a plane seen by the invented bench (320×240 px)
// before and after it moves 1 mm toward the cameras, measures it from the
// page's stereo section, and checks the shape and w maps and the 3D view
// (drawn, and turned by the slider), that the page reads the scene's 1 mm
// of w, that a quarter turn about the vertical makes the specimen's x axis
// point away from the viewer, and that a rig for other images is refused
// with the service's message; then it measures a series of the
// reference pair and two later pairs (1 mm and 0.5 mm toward the
// cameras), and checks the page's curve of mean w and the state it shows
// from the list.
func checkStereo(b *browser) {
	b.t.Helper()
	const w, h = 320, 240
	dir := b.t.TempDir()
	rig := filepath.Join(dir, "rig.json")
	writeRig(b, rig, w, h)
	other := filepath.Join(dir, "rig640.json")
	writeRig(b, other, 640, 480)
	p, err := synth.NewPattern(synth.PatternOptions{Diameter: 11, Seed: 4, Bounds: synth.Rect{X0: -750, Y0: -600, X1: 750, Y1: 600}})
	if err != nil {
		b.t.Fatal(err)
	}
	lc, rc := synth.BenchRig(w, h)
	var files []string
	at := func(w float64) synth.Placement {
		return synth.Placement{Shape: synth.Plane{}, Pose: synth.Pose{T: [3]float64{0, 0, w}}}
	}
	for k, pl := range []synth.Placement{at(0), at(1), at(0.5)} {
		for s, c := range []synth.Cam{lc, rc} {
			g, _, err := synth.RenderSurface(tenthMM{p}, pl, c, synth.RenderOptions{W: w, H: h, Supersample: 2, Noise: 0.5, Seed: int64(2*k + s)})
			if err != nil {
				b.t.Fatal(err)
			}
			f := filepath.Join(dir, fmt.Sprintf("%s%d.png", []string{"L", "R"}[s], k))
			if err := imageio.WriteFile(f, g, 8); err != nil {
				b.t.Fatal(err)
			}
			files = append(files, f)
		}
	}
	b.run("choose the rig and the four images",
		chromedp.SetUploadFiles(chromedp.ID("st-rig"), []string{rig}),
		chromedp.SetUploadFiles(chromedp.ID("st-lref"), []string{files[0]}),
		chromedp.SetUploadFiles(chromedp.ID("st-rref"), []string{files[1]}),
		chromedp.SetUploadFiles(chromedp.ID("st-ldef"), []string{files[2]}),
		chromedp.SetUploadFiles(chromedp.ID("st-rdef"), []string{files[3]}))
	b.run("measure", b.click("#st-run"))
	b.wait(`document.getElementById("st-status").textContent === "done"`, "the stereo measurement did not finish")
	if mw := b.number(`mottleStereo.meanW`); math.Abs(mw-1) > 0.01 {
		b.t.Errorf("the page reads a mean w of %.4f mm; the scene moved 1 mm", mw)
	}
	for _, c := range []string{"st-shape", "st-w", "st-3d"} {
		if n := b.number(fmt.Sprintf(`distinctColours(document.getElementById(%q))`, c)); n < 3 {
			b.t.Errorf("%s has %v colours, want a drawn plot", c, n)
		}
	}
	if q := b.number(`mottleStereo.quads`); q < 50 {
		b.t.Errorf("the 3D view drew %v quads, want the surface", q)
	}
	b.shot("stereo.png", "#stereo")
	before := b.str(`document.getElementById("st-3d").toDataURL()`)
	b.run("turn the 3D view", setValue("#st-yaw", "60"))
	if after := b.str(`document.getElementById("st-3d").toDataURL()`); after == before {
		b.t.Error("the 3D view did not change when the turn slider moved")
	}
	r := b.str(`(() => { const v = mottleStereo.view; const s = [v.yaw, v.pitch]; v.yaw = 90; v.pitch = 0; const [cx, cy, cz] = v.centre; const p = v.rotate(cx + 1, cy, cz); v.yaw = s[0]; v.pitch = s[1]; return p.map(x => x.toFixed(9)).join(","); })()`)
	if r != "0.000000000,0.000000000,-1.000000000" {
		b.t.Errorf("a quarter turn takes the specimen's x axis to %s in view coordinates, want 0,0,-1 (away from the viewer)", r)
	}
	// A series: the reference pair, then the plane 1 mm and 0.5 mm toward
	// the cameras (the right images chosen in another order: the page
	// pairs them by name).
	b.run("choose the later pairs of a series",
		chromedp.SetUploadFiles(chromedp.ID("st-sleft"), []string{files[2], files[4]}),
		chromedp.SetUploadFiles(chromedp.ID("st-sright"), []string{files[5], files[3]}))
	b.run("measure the series", b.click("#st-srun"))
	b.wait(`document.getElementById("st-sstatus").textContent === "done"`, "the stereo series did not finish")
	for k, want := range []float64{0, 1, 0.5} {
		if got := b.number(fmt.Sprintf(`mottleStereo.series.meanW[%d]`, k)); math.Abs(got-want) > 0.01 {
			b.t.Errorf("series state %d: the page reads a mean w of %.4f mm; the scene moved %.1f mm", k, got, want)
		}
	}
	if n := b.number(`mottleStereo.curvePoints`); n != 3 {
		b.t.Errorf("the series plot drew %v points, want 3", n)
	}
	if mw := b.number(`mottleStereo.meanW`); math.Abs(mw-1) > 0.01 {
		b.t.Errorf("the first state of the series shows a mean w of %.4f mm, want 1", mw)
	}
	// The count of points measured in 3D includes the points at the edge
	// of the grid, which have a displacement but no surface strain.
	if m, ok := b.number(`mottleStereo.measured`), b.number(`mottleStereo.ok`); !(m > ok && m >= 350) {
		b.t.Errorf("the page counts %v points measured in 3D and %v with a strain; want the edge points counted too (350 or more of 408)", m, ok)
	}
	b.run("show the second state", setValue("#st-state", "1"))
	b.wait(`mottleStereo.series.shown === 1`, "the second state of the series was not shown")
	if mw := b.number(`mottleStereo.meanW`); math.Abs(mw-0.5) > 0.01 {
		b.t.Errorf("the second state of the series shows a mean w of %.4f mm, want 0.5", mw)
	}
	b.shot("stereo-series.png", "#stereo")

	b.run("choose a rig calibrated on 640×480 images", chromedp.SetUploadFiles(chromedp.ID("st-rig"), []string{other}))
	b.run("measure again", b.click("#st-run"))
	b.wait(`document.getElementById("st-status").textContent === "failed"`, "a rig for other images was not refused")
	if msg := b.text("#st-error"); !strings.Contains(msg, "640×480") {
		b.t.Errorf("error box %q does not say the rig was calibrated on 640×480 images", msg)
	}
}

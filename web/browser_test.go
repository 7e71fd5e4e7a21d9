package web_test

// Browser tests of the preview: the real `mottle serve` binary on
// 127.0.0.1 with a temporary data directory, driven through Debian's
// Chromium with chromedp.
//
// The cancel step runs in a second tab against a server in this process
// whose analyzer holds the job until it is canceled (see checkCancel).
// Every console error and failed request fails the test unless the
// test's allow-list names it with a reason (previewAllowed).
//
// Screenshots are written to $MOTTLE_ARTIFACTS (default: a temporary
// directory), whose path the test logs. Set MOTTLE_PREVIEW_URL to run the
// test against a server that is already running instead of building one.

import (
	"bytes"
	"context"
	"encoding/base64"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"math"
	"mime/multipart"
	"net"
	"net/http"
	"net/http/httptest"
	"net/textproto"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"runtime/pprof"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/chromedp/cdproto/cdp"
	"github.com/chromedp/cdproto/input"
	cdplog "github.com/chromedp/cdproto/log"
	"github.com/chromedp/cdproto/network"
	"github.com/chromedp/cdproto/page"
	"github.com/chromedp/cdproto/runtime"
	"github.com/chromedp/chromedp"
	"github.com/chromedp/chromedp/kb"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/embedded"
	"github.com/mottledic/mottle/pkg/synth"
	"github.com/mottledic/mottle/web"
)

// chromium is Debian's Chromium, installed by .ci/run.
const chromium = "/usr/bin/chromium"

func TestBrowserPreview(t *testing.T) {
	if _, err := os.Stat(chromium); err != nil {
		t.Fatalf("the browser tests need Debian's chromium at %s; install it with `apt-get install chromium` (%v)", chromium, err)
	}
	art := artifacts(t)
	base := os.Getenv("MOTTLE_PREVIEW_URL")
	if base == "" {
		base = startServer(t)
	}
	ctx := newBrowser(t)
	b := newPage(t, ctx, art, append(previewAllowed, stereoAllowed...))

	// Each step below depends on the one before, so they run in order on
	// one page and the first failure stops the test.
	b.run("load the page", chromedp.Navigate(base+"/"), chromedp.WaitVisible(chromedp.ID("btn-demo")))
	b.wait(`document.body.dataset.ready === "true"`, "the page's script did not start")

	b.step("colour maps against CIELAB and CIEDE2000 (scikit-image)")
	checkColourMaps(b)

	b.step("the image check's preview of a 64-megapixel frame decodes in the browser")
	checkLargePreview(b)

	b.step("run the demo")
	b.run("click the demo button", b.click("#btn-demo"))
	b.waitResult()
	b.shot("demo-page.png", "")
	b.shot("demo-map.png", "#map-canvas")
	checkMapDrawn(b)

	b.step("hover read-out on the demo field")
	k := b.centrePoint()
	vals := b.hover(k)
	if len(vals) < 5 {
		t.Fatalf("hover read-out shows %d numeric quantities, want every quantity of the field: %v", len(vals), vals)
	}
	for _, q := range []string{"u", "v"} {
		want := b.number(fmt.Sprintf(`mottlePreview.view.field.value(%q, %d)`, q, k))
		if got, ok := vals[q]; !ok || math.Abs(got-want) > 1e-9*math.Max(1, math.Abs(want)) {
			t.Errorf("read-out %s = %v (present %v), field.json has %v at point %d", q, got, ok, want, k)
		}
	}
	t.Logf("demo read-out at point %d: u = %.4g px, v = %.4g px, E11 = %.4g, E22 = %.4g", k, vals["u"], vals["v"], vals["E11"], vals["E22"])

	b.step("keyboard: arrow keys step the read-out between grid points")
	b.run("press the right arrow on the map", chromedp.Focus(chromedp.ID("map-canvas")), chromedp.KeyEvent(kb.ArrowRight))
	if next := int(b.number(`+document.getElementById("readout-where").dataset.k`)); next != k+1 {
		t.Errorf("after the right arrow the read-out is at point %d, want %d", next, k+1)
	}

	b.step("every control has a label")
	if missing := b.str(`[...document.querySelectorAll("input, select, textarea, button")].filter(e => e.type !== "hidden" && !(e.labels && e.labels.length) && !e.getAttribute("aria-label") && !(e.tagName === "BUTTON" && e.textContent.trim())).map(e => e.id || e.name || e.tagName).join(", ")`); missing != "" {
		t.Errorf("controls without a label: %s", missing)
	}

	b.step("draw a profile with the line tool")
	b.run("choose the line tool", b.click(`input[name=tool][value=line]`))
	x0, y0, x1, y1 := b.fieldSpan()
	b.drag(x0, y0, x1, y1)
	b.wait(`+document.getElementById("profile-text").dataset.count > 10`, "no profile was plotted after dragging a line across the map")
	if n := b.number(`distinctColours(document.getElementById("profile-canvas"))`); n < 3 {
		t.Errorf("profile plot has %v colours, want a drawn plot", n)
	}
	b.shot("profile.png", ".profile")
	b.run("back to the read tool", b.click(`input[name=tool][value=read]`))

	b.step("vectors over the deformed image")
	b.run("show vectors on the deformed image",
		b.click(`input[name=on][value=deformed]`),
		b.click("#vectors"))
	checkMapDrawn(b)
	b.shot("demo-deformed-vectors.png", "#map-canvas")
	b.run("vectors relative to the mean", b.click("#vec-relative"))
	if got := b.text("#vec-info"); !strings.Contains(got, "after removing the mean") {
		t.Errorf("vector note %q does not say the mean was removed", got)
	}
	b.shot("demo-relative-vectors.png", "#map-canvas")
	b.run("absolute vectors", b.click("#vec-relative"))
	b.run("back to the reference view",
		b.click(`input[name=on][value=reference]`),
		b.click("#vectors"))
	b.run("smooth map", b.click("#smooth"))
	checkMapDrawn(b)
	b.shot("demo-smooth.png", "#map-canvas")
	b.run("cell map", b.click("#smooth"))

	b.step("upload a pair with a known homogeneous stretch")
	checkKnownStretch(b)

	b.step("upload a 16-bit TIFF pair: preview and speckle size from the service")
	checkTIFFPair(b)

	b.step("drag and drop a file onto the deformed-image zone")
	b.run("drop a file", eval(`(async () => {
		const c = new OffscreenCanvas(40, 30); c.getContext('2d').fillRect(5, 5, 10, 10);
		const file = new File([await c.convertToBlob({type: 'image/png'})], 'dropped.png', {type: 'image/png'});
		const dt = new DataTransfer(); dt.items.add(file);
		document.getElementById('drop-deformed').dispatchEvent(new DragEvent('drop', {dataTransfer: dt, bubbles: true, cancelable: true}));
	})()`))
	b.wait(`/dropped\.png.*40 × 30 px/.test(document.getElementById("info-deformed").textContent)`, "the dropped file was not taken")

	b.step("progress from server-sent events, and cancel")
	checkCancel(b, startHoldingServer(t))

	b.step("a bad upload shows a readable error")
	checkBadUpload(b)

	b.step("reopen an earlier result from the list")
	b.wait(`document.querySelectorAll('#work-list .work-item[data-kind=analysis]').length >= 2`, "the earlier results are not listed")
	b.run("open the newest earlier analysis", eval(`document.body.dataset.result = ""`),
		b.click(`#work-list .work-item[data-kind=analysis] .work-acts button`))
	b.waitResult()
	checkMapDrawn(b)

	b.step("a series: frame slider and curve")
	checkSeries(b, base)

	b.step("camera calibration: per-view errors and the distortion plot")
	checkCalibration(b)

	b.step("stereo: shape and w maps and the 3D view")
	checkStereo(b)
	b.finish()
}

// previewAllowed are the console errors and failed requests that
// TestBrowserPreview causes on purpose; any other fails the test.
var previewAllowed = []allowance{
	{regexp.MustCompile(`^request POST \S+/v1/images/check: 415 `),
		"checkBadUpload chooses a text file as the reference: the page sends it for the image check (as it does every chosen file) and the service answers 415 with a problem document"},
	{regexp.MustCompile(`^request POST \S+/v1/analyses: 415 `),
		"checkBadUpload runs the text file: the service answers 415 with a problem document, which the page shows"},
	{regexp.MustCompile(`^console error \(network\): Failed to load resource: the server responded with a status of 415 \(Unsupported Media Type\) \S+/v1/(images/check|analyses)$`),
		"Chromium logs each of the two 415 answers of checkBadUpload as a failed resource"},
}

// checkSeries creates a series through the API, appends three frames of a
// growing homogeneous stretch with time and load, opens it in the page and
// checks the curve and the frame slider. The mean E11 of a frame with
// F11 = 1 + a is a + a²/2 (Green–Lagrange; Holzapfel 2000).
func checkSeries(b *browser, base string) {
	t := b.t
	t.Helper()
	const w, h = 160, 128
	po := synth.PatternOptions{Diameter: 4, Seed: 11, Bounds: synth.ImageRect(w, h, 30)}
	pat, err := synth.NewPattern(po)
	if err != nil {
		t.Fatal(err)
	}
	ro := synth.RenderOptions{W: w, H: h, Bits: 8}
	png := func(m synth.Motion) []byte {
		g, _, err := synth.Render(pat, m, ro)
		if err != nil {
			t.Fatalf("render: %v", err)
		}
		var buf bytes.Buffer
		if err := imageio.WritePNG(&buf, g, 8); err != nil {
			t.Fatal(err)
		}
		return buf.Bytes()
	}
	var body bytes.Buffer
	mw := multipart.NewWriter(&body)
	part, _ := mw.CreatePart(textproto.MIMEHeader{
		"Content-Disposition": {`form-data; name="reference"; filename="ref.png"`},
		"Content-Type":        {"image/png"}})
	part.Write(png(synth.Identity{}))
	pp, _ := mw.CreateFormField("params")
	pp.Write([]byte(`{"subset": 21, "step": 10}`))
	mw.Close()
	b.step("series: reference rendered")
	resp, err := http.Post(base+"/v1/series", mw.FormDataContentType(), &body)
	if err != nil {
		t.Fatalf("create a series: %v", err)
	}
	var sr struct {
		ID string `json:"id"`
	}
	err = json.NewDecoder(resp.Body).Decode(&sr)
	resp.Body.Close()
	if err != nil || resp.StatusCode != http.StatusCreated || sr.ID == "" {
		t.Fatalf("create a series: %s, id %q, %v", resp.Status, sr.ID, err)
	}
	strains := []float64{0.002, 0.004, 0.006}
	for i, a := range strains {
		m := synth.Affine{F: [2][2]float64{{1 + a, 0}, {0, 1}}, CX: w / 2, CY: h / 2}
		url := fmt.Sprintf("%s/v1/series/%s/frames?time=%d&load=%g", base, sr.ID, 10*(i+1), 1000*a)
		resp, err := http.Post(url, "image/png", bytes.NewReader(png(m)))
		if err != nil {
			t.Fatalf("append frame %d: %v", i, err)
		}
		resp.Body.Close()
		if resp.StatusCode/100 != 2 {
			t.Fatalf("append frame %d: %s", i, resp.Status)
		}
		b.step(fmt.Sprintf("series: frame %d appended", i))
	}
	b.step("series: frames appended")
	b.run("refresh the list of earlier work", b.click("#shelf-refresh"))
	b.wait(fmt.Sprintf(`!!document.querySelector('#work-list .work-item[data-id="%s"]')`, sr.ID), "the series is not in the list of earlier work")
	b.run("open the series from the list", b.click(fmt.Sprintf(`#work-list .work-item[data-id="%s"] .work-acts button`, sr.ID)))
	b.wait(`/frame \d/.test(document.getElementById("results-source").textContent) && document.getElementById("curve-y").options.length > 0`, "the series did not open")
	b.step("series: opened")
	b.run("plot mean E11 against load", setValue("#curve-y", "mean E11"), setValue("#curve-x", "load"))
	if got := b.text("#curve-text"); !strings.Contains(got, "3 of 3 frames") {
		t.Errorf("curve text %q, want all 3 frames plotted", got)
	}
	if n := b.number(`distinctColours(document.getElementById("curve-canvas"))`); n < 3 {
		t.Errorf("curve plot has %v colours, want a drawn plot", n)
	}
	for i, a := range strains {
		got := b.number(fmt.Sprintf(`mottlePreview.state.curve[%d]["mean E11"]`, i))
		if want := a + a*a/2; math.Abs(got-want) > 5e-4 {
			t.Errorf("curve: frame %d mean E11 = %.5g, truth %.5g", i, got, want)
		}
	}
	b.shot("series.png", "#series")
	b.step("series: curve checked")
	b.run("go to the first frame", setValue("#frame-slider", "0"))
	b.wait(`/frame 0/.test(document.getElementById("results-source").textContent)`, "the slider did not show frame 0")
	checkMapDrawn(b)
}

// checkMapDrawn asserts that the map canvas holds the colour-mapped field
// over an image, not a blank or flat canvas.
func checkMapDrawn(b *browser) {
	b.t.Helper()
	n := b.number(`mottlePreview.view.distinctColours()`)
	if n < 50 {
		b.t.Fatalf("map canvas has %v distinct colours, want a drawn map (≥ 50)", n)
	}
	// Inside the field, the overlay must differ from the bare image: the
	// canvas pixel at a valid point is not grey.
	chroma := b.number(`(() => {
		const v = mottlePreview.view, f = v.field, c = v.canvas.getContext('2d');
		let sum = 0, m = 0;
		for (let k = 0; k < f.n; k += 7) {
			if (!f.ok[k]) continue;
			const x = Math.round((f.X[k] + 0.5) * v.s), y = Math.round((f.Y[k] + 0.5) * v.s);
			const d = c.getImageData(x, y, 1, 1).data;
			sum += Math.max(d[0], d[1], d[2]) - Math.min(d[0], d[1], d[2]); m++;
		}
		return m ? sum / m : 0;
	})()`)
	if chroma < 10 {
		b.t.Fatalf("map overlay mean chroma %.1f over valid points: the colour map was not drawn", chroma)
	}
}

// checkKnownStretch uploads a pair rendered by pkg/synth with a homogeneous
// stretch and compares the hover read-out with the exact answer: for
// x = C + F·(X − C) with F = diag(1 + a, 1 + b), u = a·(X − Cx) and the
// Green–Lagrange strain E11 = a + a²/2 (E = ½(FᵀF − I); Holzapfel 2000,
// "Nonlinear Solid Mechanics", ch. 2).
func checkKnownStretch(b *browser) {
	t := b.t
	t.Helper()
	const w, h = 192, 160
	const a, bb = 0.01, -0.004
	cx, cy := float64(w-1)/2, float64(h-1)/2
	m := synth.Affine{F: [2][2]float64{{1 + a, 0}, {0, 1 + bb}}, CX: cx, CY: cy}
	ref, def, err := synth.Pair(synth.PatternOptions{Diameter: 4, Seed: 7}, m, synth.RenderOptions{W: w, H: h, Bits: 8})
	if err != nil {
		t.Fatalf("render the stretch pair: %v", err)
	}
	dir := t.TempDir()
	refPath, defPath := filepath.Join(dir, "stretch_ref.png"), filepath.Join(dir, "stretch_def.png")
	for p, g := range map[string]*imageio.Gray{refPath: ref, defPath: def} {
		if err := imageio.WriteFile(p, g, 8); err != nil {
			t.Fatal(err)
		}
	}
	b.run("choose the stretch pair",
		chromedp.SetUploadFiles(chromedp.ID("file-reference"), []string{refPath}),
		chromedp.SetUploadFiles(chromedp.ID("file-deformed"), []string{defPath}))
	b.wait(`/192 × 160 px/.test(document.getElementById("info-deformed").textContent) && /192 × 160 px/.test(document.getElementById("info-reference").textContent)`, "the chosen files were not read")
	// The speckle size is measured in the browser from the autocorrelation;
	// for discs at 50 % cover its half-height width is 0.6–0.85 of the disc
	// diameter (derived from the overlap area of two discs), so accept a
	// generous band around the rendered 4 px.
	speckle := b.number(`mottlePreview.state.speckle`)
	t.Logf("measured speckle size %.2f px for rendered 4 px discs", speckle)
	if !(speckle > 2 && speckle < 5) {
		t.Errorf("measured speckle size %.2f px, want 2–5 px for 4 px discs", speckle)
	}
	b.run("scroll to the region editor", eval(`document.getElementById("roi-canvas").scrollIntoView({block: "center"})`))
	at := func(x, y float64) (float64, float64) {
		p := value[[]float64](b, fmt.Sprintf(`mottlePreview.roiToClient(%g, %g)`, x, y))
		return p[0], p[1]
	}
	click := func(x, y float64) chromedp.Action[chromedp.Void] {
		cx, cy := at(x, y)
		return chromedp.MouseClickXY(cx, cy)
	}
	roiJSON := func() string { return b.str(`document.getElementById("roi-json").value`) }
	// A polygon closed with Enter and a hole closed with a double-click.
	b.run("draw a polygon", b.click(`input[name=roi-mode][value=polygon]`),
		click(30, 30), click(150, 30), click(90, 130), chromedp.KeyEvent(kb.Enter))
	b.run("draw a hole", b.click(`input[name=roi-mode][value=hole]`),
		click(80, 50), click(100, 50), click(90, 70))
	hx, hy := at(90, 70)
	b.run("close the hole", chromedp.MouseClickXY(hx, hy, chromedp.ClickCount(2)))
	if got, want := roiJSON(), `{"polygon":[[30,30],[150,30],[90,130]],"holes":[[[80,50],[100,50],[90,70]]]}`; got != want {
		t.Errorf("drawn polygon and hole give the region %s, want %s", got, want)
	}
	b.shot("roi-polygon.png", "#roi-canvas")
	b.run("clear the region", b.click("#btn-roi-clear"))
	if got := roiJSON(); got != "{}" {
		t.Errorf("after clearing, the region is %s, want {}", got)
	}
	// The region of the run: a rectangle dragged with the mouse, and a seed.
	roi := [4]float64{24, 20, 168, 140}
	x0, y0 := at(roi[0], roi[1])
	x1, y1 := at(roi[2], roi[3])
	b.run("rectangle tool", b.click(`input[name=roi-mode][value=rect]`))
	b.drag(x0, y0, x1, y1)
	b.run("place a seed", b.click(`input[name=roi-mode][value=seed]`), click(96, 80))
	if got, want := roiJSON(), `{"rect":[24,20,168,140],"seeds":[[96,80]]}`; got != want {
		t.Errorf("drawn rectangle and seed give the region %s, want %s", got, want)
	}
	b.shot("stretch-roi.png", "#roi-canvas")
	checkSpeckleAgainstSciPy(b, refPath, speckle)
	// The service's image check of both images (pkg/quality): the rendered
	// pair is well exposed, so no warning, and a subset for 0.01 px.
	b.wait(`(() => { const t = document.getElementById("adv-quality").textContent;
		return /reference: /.test(t) && /deformed: /.test(t) && !/checking/.test(t); })()`, "the image check did not finish")
	b.shot("image-check.png", "#advice")
	if q, a := b.text("#adv-quality"), b.text("#adv-auto"); !strings.Contains(q, "no problems found") || !strings.Contains(a, "px for σ ≤ 0.01 px") {
		t.Errorf("image check shows %q and %q", q, a)
	}
	b.run("set the parameters",
		setValue("#p-subset", "21"), setValue("#p-step", "8"), setValue("#p-window", "5"))
	b.run("run", eval(`document.body.dataset.result = ""`), b.click("#btn-run"))
	b.waitResult()
	b.shot("stretch-map.png", "#map-canvas")
	// Every measured point's subset must lie inside the drawn rectangle,
	// so the region reached the service.
	outside := b.number(fmt.Sprintf(`(() => {
		const f = mottlePreview.view.field, h = 10; let n = 0;
		for (let k = 0; k < f.n; k++) if (f.ok[k] && (f.X[k] - h < %g || f.X[k] + h >= %g || f.Y[k] - h < %g || f.Y[k] + h >= %g)) n++;
		return n;
	})()`, roi[0], roi[2], roi[1], roi[3]))
	if outside > 0 {
		t.Errorf("%v measured points have subsets outside the drawn region", outside)
	}
	k := b.centrePoint()
	vals := b.hover(k)
	X := b.number(fmt.Sprintf(`mottlePreview.view.field.X[%d]`, k))
	Y := b.number(fmt.Sprintf(`mottlePreview.view.field.Y[%d]`, k))
	tr := synth.At(m, X, Y)
	checks := []struct {
		q         string
		want, tol float64
	}{
		{"u", tr.U, 0.05},
		{"v", tr.V, 0.05},
		{"E11", a + a*a/2, 1e-3},
		{"E22", bb + bb*bb/2, 1e-3},
		{"E12", 0, 1e-3},
	}
	for _, c := range checks {
		got, ok := vals[c.q]
		if !ok {
			t.Errorf("read-out at (%g, %g) has no number for %s: %v", X, Y, c.q, vals)
			continue
		}
		t.Logf("read-out %s at (%g, %g): %.5g, truth %.5g", c.q, X, Y, got, c.want)
		if math.Abs(got-c.want) > c.tol {
			t.Errorf("read-out %s at (%g, %g) = %.5g, truth %.5g (tolerance %g)", c.q, X, Y, got, c.want, c.tol)
		}
	}
}

// checkTIFFPair uploads a 16-bit TIFF pair (12-bit levels, as most
// machine-vision cameras store them) rendered by pkg/synth with a
// homogeneous stretch. The browser cannot decode TIFF, so the page must
// show the service's stretched preview, its speckle size (within 15 % of
// imageio.SpeckleSize of the rendered image, the autocorrelation measure
// of the iDICs Good Practices Guide 2018) and run the analysis on the
// files themselves. For F = diag(1 + a, 1 + b) the Green–Lagrange strain
// is E11 = a + a²/2 (E = ½(FᵀF − I); Holzapfel 2000, "Nonlinear Solid
// Mechanics", ch. 2).
func checkTIFFPair(b *browser) {
	t := b.t
	t.Helper()
	const w, h = 176, 144
	const a, bb = 0.008, -0.003
	m := synth.Affine{F: [2][2]float64{{1 + a, 0}, {0, 1 + bb}}, CX: float64(w-1) / 2, CY: float64(h-1) / 2}
	ref, def, err := synth.Pair(synth.PatternOptions{Diameter: 5, Seed: 21}, m, synth.RenderOptions{W: w, H: h, Bits: 12, Noise: 4, Supersample: 2})
	if err != nil {
		t.Fatalf("render the TIFF pair: %v", err)
	}
	want, err := imageio.SpeckleSize(ref)
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	refPath, defPath := filepath.Join(dir, "stretch16_ref.tif"), filepath.Join(dir, "stretch16_def.tif")
	for p, g := range map[string]*imageio.Gray{refPath: ref, defPath: def} {
		if err := imageio.WriteFile(p, g, 16); err != nil {
			t.Fatal(err)
		}
	}
	b.run("choose the TIFF pair",
		chromedp.SetUploadFiles(chromedp.ID("file-reference"), []string{refPath}),
		chromedp.SetUploadFiles(chromedp.ID("file-deformed"), []string{defPath}))
	b.wait(`/stretch16_def.*176 × 144 px/.test(document.getElementById("info-deformed").textContent) && /stretch16_ref.*176 × 144 px.*16-bit/.test(document.getElementById("info-reference").textContent)`, "the TIFF files were not previewed")
	// The preview: a 12-bit image shown unstretched would be nearly black
	// (levels up to 4095 of 65535); stretched it spans the grey range.
	b.run("scroll to the region editor", eval(`document.getElementById("roi-canvas").scrollIntoView({block: "center"})`))
	if n := b.number(`distinctColours(document.getElementById("roi-canvas"))`); n < 50 {
		t.Errorf("region editor shows %v distinct colours for the TIFF reference, want a visible preview (≥ 50)", n)
	}
	if l := b.number(`(() => { const c = document.getElementById("roi-canvas"), d = c.getContext('2d').getImageData(0, 0, c.width, c.height).data; let s = 0; for (let p = 0; p < d.length; p += 4) s += d[p + 1]; return s / (d.length / 4); })()`); l < 40 {
		t.Errorf("the TIFF preview has mean level %.1f of 255: not stretched", l)
	}
	b.shot("tiff-preview.png", "#roi-canvas")
	shown := b.text("#adv-speckle")
	var got float64
	if _, err := fmt.Sscan(shown, &got); err != nil {
		t.Fatalf("speckle size shown as %q, not a number", shown)
	}
	t.Logf("TIFF pair: the page shows a speckle size of %q; imageio.SpeckleSize %.3f px", shown, want)
	if math.Abs(got-want) > 0.15*want {
		t.Errorf("the page shows a speckle size of %.3f px, imageio.SpeckleSize gives %.3f px", got, want)
	}
	if !strings.Contains(shown, "measured by the service") {
		t.Errorf("the speckle size shown for the TIFF does not say it came from the service: %q", shown)
	}
	if !strings.Contains(b.text("#adv-subset"), "3 speckles across") {
		t.Errorf("no subset advice for the TIFF: %q", b.text("#adv-subset"))
	}
	b.run("whole image, and run", b.click("#btn-roi-clear"),
		setValue("#p-subset", "21"), setValue("#p-step", "8"), setValue("#p-window", "5"),
		eval(`document.body.dataset.result = ""`), b.click("#btn-run"))
	b.waitResult()
	checkMapDrawn(b)
	b.shot("tiff-map.png", "#map-canvas")
	if wh := b.str(`mottlePreview.state.job.width + "x" + mottlePreview.state.job.height`); wh != "176x144" {
		t.Errorf("the analysis ran on a %s image, want the 176×144 TIFF", wh)
	}
	k := b.centrePoint()
	e11 := b.number(fmt.Sprintf(`mottlePreview.view.field.value("E11", %d)`, k))
	t.Logf("TIFF pair: E11 at the centre %.5g, truth %.5g", e11, a+a*a/2)
	if math.Abs(e11-(a+a*a/2)) > 1e-3 {
		t.Errorf("TIFF pair: E11 at the centre %.5g, truth %.5g (tolerance 1e-3)", e11, a+a*a/2)
	}
}

// checkCancel starts an analysis in a second tab of the page, served by
// a server in this process (base) that holds a 384×384 analysis after its
// first progress report until it is canceled, waits for that progress to
// arrive as server-sent events and cancels it. The job is certainly
// running when the cancel button is pressed, however fast the machine.
func checkCancel(b0 *browser, hs *holdServer) {
	t := b0.t
	t.Helper()
	tab, closeTab := chromedp.NewContext(b0.ctx)
	defer closeTab()
	b := newPage(t, tab, b0.art, nil)
	b.n = b0.n
	defer func() { b0.n = b.n }()
	b.diag = func() string {
		jobs := "?"
		if resp, err := http.Get(hs.url + "/v1/analyses"); err == nil {
			raw, _ := io.ReadAll(io.LimitReader(resp.Body, 8000))
			resp.Body.Close()
			jobs = string(raw)
		}
		return fmt.Sprintf("holding analyzer:\n%s\nrequests answered:\n%s\njobs: %s", hs.an.story(), tail(hs.log.String(), 6000), jobs)
	}
	b.run("open the page of the holding server", chromedp.Navigate(hs.url+"/"), chromedp.WaitVisible(chromedp.ID("btn-run")))
	b.wait(`document.body.dataset.ready === "true"`, "the page's script did not start")
	const w, h = holdSize, holdSize
	m := synth.Affine{F: [2][2]float64{{1.002, 0}, {0, 1}}, CX: w / 2, CY: h / 2}
	ref, def, err := synth.Pair(synth.PatternOptions{Diameter: 4, Seed: 3}, m, synth.RenderOptions{W: w, H: h, Bits: 8, Supersample: 2})
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	refPath, defPath := filepath.Join(dir, "big_ref.png"), filepath.Join(dir, "big_def.png")
	for p, g := range map[string]*imageio.Gray{refPath: ref, defPath: def} {
		if err := imageio.WriteFile(p, g, 8); err != nil {
			t.Fatal(err)
		}
	}
	b.run("choose a large pair",
		chromedp.SetUploadFiles(chromedp.ID("file-reference"), []string{refPath}),
		chromedp.SetUploadFiles(chromedp.ID("file-deformed"), []string{defPath}))
	b.wait(`/384 × 384 px/.test(document.getElementById("info-deformed").textContent) && /384 × 384 px/.test(document.getElementById("info-reference").textContent)`, "the chosen files were not read")
	b.run("dense grid, whole image, and run",
		b.click("#btn-roi-clear"),
		setValue("#p-subset", "21"), setValue("#p-step", "1"),
		eval(`mottlePreview.state.events = 0`),
		b.click("#btn-run"))
	b.wait(`mottlePreview.state.events > 0 && /running .*\([1-9][0-9]* of/.test(document.getElementById("progress-text").textContent)`, "no progress arrived as server-sent events")
	b.shot("progress.png", ".run-row + .progress-row")
	b.run("cancel", b.click("#btn-cancel"))
	b.wait(`/^canceled/.test(document.getElementById("progress-text").textContent)`, "the analysis was not canceled")
	if ok := b.str(`document.getElementById("btn-run").disabled ? "disabled" : "enabled"`); ok != "enabled" {
		t.Errorf("after cancel the run button is %s", ok)
	}
	// The hold ends through the job's context, canceled by the client.
	story := hs.an.story()
	t.Logf("holding analyzer:\n%s", story)
	if !strings.Contains(story, "hold released: context canceled (cause canceled by a client)") {
		t.Errorf("the held analysis did not end through the client's cancel:\n%s", story)
	}
	b.finish()
}

// holdSize is the width and height of the analysis that the holding
// server of checkCancel holds.
const holdSize = 384

// holdingAnalyzer is the real pipeline, except that an analysis of a
// holdSize×holdSize pair stops at its first progress report (done > 0)
// until its context ends (the job is canceled). Progress reports of 0
// done are not passed on, so that the report held is the one the service
// records and sends. It records when the hold began and ended and what
// Run returned, for the test's message when the cancel does not arrive.
type holdingAnalyzer struct {
	service.Pipeline
	mu     sync.Mutex
	events []string
}

func (a *holdingAnalyzer) note(format string, args ...any) {
	a.mu.Lock()
	defer a.mu.Unlock()
	a.events = append(a.events, time.Now().Format("15:04:05.000")+" "+fmt.Sprintf(format, args...))
}

// story returns what happened to the held analyses so far.
func (a *holdingAnalyzer) story() string {
	a.mu.Lock()
	defer a.mu.Unlock()
	return strings.Join(a.events, "\n")
}

func (a *holdingAnalyzer) Run(ctx context.Context, in service.Input, progress func(done, total int)) (*service.Result, error) {
	if in.Ref.W != holdSize || in.Ref.H != holdSize {
		return a.Pipeline.Run(ctx, in, progress)
	}
	a.note("analysis started")
	var once sync.Once
	res, err := a.Pipeline.Run(ctx, in, func(done, total int) {
		if done == 0 {
			return
		}
		progress(done, total)
		once.Do(func() {
			a.note("holding at %d of %d points", done, total)
			<-ctx.Done()
			a.note("hold released: %v (cause %v)", ctx.Err(), context.Cause(ctx))
		})
	})
	a.note("analysis returned: %v", err)
	return res, err
}

// holdServer is the server of startHoldingServer.
type holdServer struct {
	url string
	an  *holdingAnalyzer
	log *requestLog
}

// requestLog records the requests a server answered, with their status.
type requestLog struct {
	mu    sync.Mutex
	lines []string
}

func (l *requestLog) wrap(h http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		t0 := time.Now()
		sw := &statusWriter{ResponseWriter: w, status: http.StatusOK}
		l.add(fmt.Sprintf("%s %s %s: started", t0.Format("15:04:05.000"), r.Method, r.URL.Path))
		h.ServeHTTP(sw, r)
		l.add(fmt.Sprintf("%s %s %s: %d after %v", t0.Format("15:04:05.000"), r.Method, r.URL.Path, sw.status, time.Since(t0).Round(time.Millisecond)))
	})
}

func (l *requestLog) add(s string) {
	l.mu.Lock()
	l.lines = append(l.lines, s)
	l.mu.Unlock()
}

func (l *requestLog) String() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return strings.Join(l.lines, "\n")
}

// statusWriter keeps the status of an answer. It flushes, for the event
// streams (the service's own writer asserts http.Flusher on the writer it
// wraps), and Unwrap lets http.ResponseController reach the rest.
type statusWriter struct {
	http.ResponseWriter
	status int
}

func (w *statusWriter) WriteHeader(code int) { w.status = code; w.ResponseWriter.WriteHeader(code) }

func (w *statusWriter) Flush() { _ = http.NewResponseController(w.ResponseWriter).Flush() }

func (w *statusWriter) Unwrap() http.ResponseWriter { return w.ResponseWriter }

// startHoldingServer serves the preview and the API from this process on
// a fresh embedded backend with holdingAnalyzer.
func startHoldingServer(t *testing.T) *holdServer {
	t.Helper()
	be, err := embedded.Open(t.TempDir(), 8)
	if err != nil {
		t.Fatal(err)
	}
	hs := &holdServer{an: &holdingAnalyzer{}, log: &requestLog{}}
	srv, err := service.New(service.Config{Backend: be, Analyzer: hs.an, Workers: 1, UI: web.Assets(),
		ShutdownGrace: time.Second, Logger: slog.New(slog.NewJSONHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	stop, err := srv.Start(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	ts := httptest.NewServer(hs.log.wrap(srv.Handler()))
	t.Cleanup(func() {
		ts.Close()
		stop()
		be.Close()
	})
	hs.url = ts.URL
	return hs
}

// checkColourMaps takes the page's colour tables and checks them with
// scikit-image: CIELAB lightness L* must rise steadily along the sequential
// maps (viridis, cividis) and fall symmetrically from the centre of the diverging one (cool–warm),
// and the CIEDE2000 colour difference between entries 16 apart must stay
// within a factor of 2 along each branch, so no part of a map hides or
// exaggerates differences. CIELAB and CIEDE2000: Sharma, Wu & Dalal 2005,
// "The CIEDE2000 color-difference formula: implementation notes,
// supplementary test data, and mathematical observations", Color Res. Appl.
// 30(1):21.
func checkColourMaps(b *browser) {
	t := b.t
	t.Helper()
	ctx, cancel := b.bounded()
	defer cancel()
	tables, err := chromedp.Run(ctx, chromedp.Evaluate[map[string][]int](
		`import('./js/colormap.js').then(m => Object.fromEntries(m.names.map(n => [n, Array.from({length: 256}, (_, i) => m.rgb(n, i / 255)).flat()])))`,
		chromedp.EvalAwaitPromise))
	if err != nil {
		t.Fatalf("read the colour tables: %v", err)
	}
	const script = `
import sys, json, numpy as np
from skimage import color
tables = json.load(sys.stdin)
out = {}
for name, flat in tables.items():
    rgb = np.array(flat, dtype=float).reshape(1, -1, 3) / 255
    lab = color.rgb2lab(rgb)[0]
    d = color.deltaE_ciede2000(lab[:-16:16], lab[16::16])
    out[name] = {"L": lab[:, 0].tolist(), "dE": d.tolist()}
json.dump(out, sys.stdout)
`
	in, _ := json.Marshal(tables)
	pctx, pcancel := context.WithTimeout(context.Background(), waitBound)
	defer pcancel()
	cmd := exec.CommandContext(pctx, "/usr/bin/python3", "-c", script)
	cmd.Stdin = bytes.NewReader(in)
	raw, err := cmd.Output()
	if err != nil {
		t.Fatalf("scikit-image reference for the colour maps (needs Debian's python3-skimage): %v", err)
	}
	var res map[string]struct {
		L  []float64 `json:"L"`
		DE []float64 `json:"dE"`
	}
	if err := json.Unmarshal(raw, &res); err != nil {
		t.Fatalf("scikit-image output: %v", err)
	}
	for _, name := range []string{"viridis", "cividis", "coolwarm"} {
		r, ok := res[name]
		if !ok || len(r.L) != 256 {
			t.Errorf("colour map %s: no table from the page", name)
			continue
		}
		branches := [][2]int{{0, 255}}
		if name == "coolwarm" {
			branches = [][2]int{{0, 127}, {128, 255}}
			for i := 0; i < 128; i++ {
				if d := math.Abs(r.L[i] - r.L[255-i]); d > 2 {
					t.Errorf("coolwarm map: L* %.1f at %d and %.1f at %d, want a symmetric lightness", r.L[i], i, r.L[255-i], 255-i)
					break
				}
			}
		}
		for _, br := range branches {
			sign := 1.0
			if name == "coolwarm" && br[0] == 128 {
				sign = -1
			}
			// Neighbouring entries may share a colour, or step back by a
			// fraction of one 8-bit level (0.15 L*), after rounding to 8
			// bits; entries 4 apart must differ in the right direction.
			for i := br[0]; i <= br[1]; i++ {
				if i > br[0] && sign*(r.L[i]-r.L[i-1]) < -0.15 {
					t.Errorf("colour map %s: L* falls back at %d (%.2f then %.2f)", name, i, r.L[i-1], r.L[i])
					break
				}
				if i+4 <= br[1] && sign*(r.L[i+4]-r.L[i]) <= 0 {
					t.Errorf("colour map %s: L* flat from %d to %d (%.2f, %.2f)", name, i, i+4, r.L[i], r.L[i+4])
					break
				}
			}
		}
		lo, hi := math.Inf(1), 0.0
		for i, d := range r.DE {
			if name == "coolwarm" && i == 7 { // the step across the centre
				continue
			}
			lo, hi = math.Min(lo, d), math.Max(hi, d)
		}
		t.Logf("colour map %s: L* %.1f … %.1f, CIEDE2000 per 16 entries %.2f … %.2f", name, r.L[0], r.L[255], lo, hi)
		// The maps are uniform in the spaces they were designed in
		// (CAM02-UCS for viridis and cividis, Msh for cool–warm), not in
		// CIEDE2000; there their steps spread by up to 2.2 (a rainbow map
		// spreads by far more), so 2.5 is the bound.
		if hi > 2.5*lo {
			t.Errorf("colour map %s: CIEDE2000 steps range from %.2f to %.2f, want within a factor of 2.5", name, lo, hi)
		}
	}
}

// checkSpeckleAgainstSciPy recomputes the speckle size of the image at path
// as the page defines it (width at half height of the normalised
// autocorrelation of the centre crop, averaged over x and y) with SciPy's
// signal.correlate as the reference implementation of the autocorrelation.
func checkSpeckleAgainstSciPy(b *browser, path string, got float64) {
	t := b.t
	t.Helper()
	const script = `
import sys, numpy as np, cv2
from scipy import signal
g = cv2.imread(sys.argv[1], cv2.IMREAD_UNCHANGED).astype(float)
h, w = g.shape
c = 1
while c * 2 <= min(w, h, 256): c *= 2
ox, oy = (w - c) // 2, (h - c) // 2
a = g[oy:oy + c, ox:ox + c]; a = a - a.mean()
r = signal.correlate(a, a, mode='full', method='fft')
n = c - np.abs(np.arange(-(c - 1), c))
r = r / np.outer(n, n); r = r / r[c - 1, c - 1]
def half(p):
    prev = 1.0
    for s in range(1, c // 2):
        if p[s] <= 0.5: return 2 * (s - 1 + (prev - 0.5) / (prev - p[s]))
        prev = p[s]
    return float('nan')
sx = half((r[c - 1, c - 1:] + r[c - 1, c - 1::-1]) / 2)
sy = half((r[c - 1:, c - 1] + r[c - 1::-1, c - 1]) / 2)
print((sx + sy) / 2)
`
	pctx, pcancel := context.WithTimeout(context.Background(), waitBound)
	defer pcancel()
	out, err := exec.CommandContext(pctx, "/usr/bin/python3", "-c", script, path).CombinedOutput()
	if err != nil {
		t.Fatalf("SciPy reference for the speckle size (needs Debian's python3-scipy and python3-opencv): %v\n%s", err, out)
	}
	var want float64
	if _, err := fmt.Sscan(string(out), &want); err != nil {
		t.Fatalf("SciPy reference printed %q", out)
	}
	t.Logf("speckle size: page %.4f px, SciPy reference %.4f px", got, want)
	if math.Abs(got-want) > 0.01 {
		t.Errorf("speckle size in the page %.4f px, SciPy reference %.4f px", got, want)
	}
}

// checkBadUpload uploads a file that is not an image and expects the
// service's problem document to be shown: a title and a field-level line.
func checkBadUpload(b *browser) {
	t := b.t
	t.Helper()
	dir := t.TempDir()
	bad := filepath.Join(dir, "not_an_image.png")
	if err := os.WriteFile(bad, []byte("this is a text file, not a PNG image\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	b.run("choose a broken reference", chromedp.SetUploadFiles(chromedp.ID("file-reference"), []string{bad}))
	b.wait(`/not_an_image/.test(document.getElementById("info-reference").textContent)`, "the broken file was not taken")
	b.run("run", b.click("#btn-run"))
	b.wait(`!document.getElementById("error-box").hidden`, "no error was shown for a broken upload")
	title := b.text("#error-box h2")
	text := b.text("#error-box")
	b.shot("bad-upload.png", "#error-box")
	t.Logf("error shown: %q", text)
	if strings.TrimSpace(title) == "" || strings.Contains(text, "[object") || strings.Contains(text, "{\"") {
		t.Errorf("error box is not readable: %q", text)
	}
	if !strings.Contains(text, "reference") {
		t.Errorf("error box does not name the part at fault (reference): %q", text)
	}
}

// browser drives one page and stops the test on the first failure.
type browser struct {
	t     *testing.T
	ctx   context.Context
	end   time.Time // testDeadline: no wait or action goes beyond it
	art   string
	n     int
	start time.Time
	w     *pageWatch
	// diag, if not nil, says more about the server when a wait or an
	// action fails (see checkCancel).
	diag func() string
}

// newPage returns a browser for the tab of ctx that fails the test on
// any console error or failed request not in allow.
func newPage(t *testing.T, ctx context.Context, art string, allow []allowance) *browser {
	t.Helper()
	w, err := watchPage(ctx, allow)
	if err != nil {
		t.Fatalf("listen to the page: %v", err)
	}
	addLog := chromedp.Func(func(ctx context.Context, t *chromedp.Target) error {
		_, err := cdp.Call(ctx, t, page.AddScriptToEvaluateOnNewDocument, page.AddScriptToEvaluateOnNewDocumentParams{Source: clickLog})
		return err
	})
	if err := chromedp.Do(ctx, addLog); err != nil {
		t.Fatalf("add the click log to the page: %v", err)
	}
	return &browser{t: t, ctx: ctx, end: testDeadline(t), art: art, start: time.Now(), w: w}
}

// clickLog keeps, in every document of a page, the last clicks: where
// they landed (client coordinates) and on which element, for b.click and
// the message of a failed wait.
const clickLog = `if (!window.mottleClicks) {
	window.mottleClicks = [];
	window.mottleLastClick = null;
	document.addEventListener('click', e => {
		const t = e.target, id = t && t.closest && t.closest('[id]');
		if (mottleLastClick === null) mottleLastClick = t; // the first click since b.click reset it
		mottleClicks.push(Math.round(performance.now()) + ' ms: (' + Math.round(e.clientX) + ', ' + Math.round(e.clientY) + ') on ' + (t ? t.tagName : '?') + (id ? '#' + id.id : ''));
		if (mottleClicks.length > 8) mottleClicks.shift();
	}, true);
}`

// click is a mouse click on the first element that matches the CSS
// selector sel, made sure to land on it. chromedp.Click reads where the
// element is and then presses the mouse there; when the page moves the
// element in between (a list of earlier work or an image check arriving
// above it), the click lands on whatever is there instead and is lost,
// more often the more loaded the machine. So click waits until the
// element is shown and stays at the same place for 100 ms, clicks its
// centre, and checks in the page's click log (clickLog) that the click
// reached the element (or its label); a click that did not (it landed
// beside, or the element was disabled) is logged and made again, up to 5
// times. A click that opens a new document counts as reached.
func (b *browser) click(sel string) chromedp.Action[chromedp.Void] {
	return chromedp.Func(func(ctx context.Context, t *chromedp.Target) error {
		if _, err := chromedp.Evaluate[bool](clickLog+`; true`)(ctx, t); err != nil {
			return err
		}
		settle := fmt.Sprintf(`new Promise(ok => {
			let last = '', same = 0;
			const look = () => {
				const e = document.querySelector(%q);
				const r = e && e.getBoundingClientRect();
				if (r && r.width > 0 && r.height > 0) {
					if (r.top < 0 || r.bottom > innerHeight || r.left < 0 || r.right > innerWidth) e.scrollIntoView({block: 'center', inline: 'center'});
					const k = [r.left, r.top, r.width, r.height].join();
					same = k === last ? same + 1 : 0;
					last = k;
					if (same >= 2) {
						window.mottleClickOn = e; mottleLastClick = null;
						return ok([r.left + r.width / 2, r.top + r.height / 2]);
					}
				}
				setTimeout(look, 50);
			};
			look();
		})`, sel)
		for try := 1; ; try++ {
			at, err := chromedp.Evaluate[[]float64](settle, chromedp.EvalAwaitPromise)(ctx, t)
			if err != nil {
				return fmt.Errorf("wait for %s to be shown and keep still: %w", sel, err)
			}
			if _, err := chromedp.MouseClickXY(at[0], at[1])(ctx, t); err != nil {
				return err
			}
			// A click on the element's label reaches it too.
			hit, err := chromedp.Evaluate[string](`(() => {
				if (!window.mottleClickOn) return "new document";
				const c = mottleLastClick, l = c && c.closest && c.closest("label");
				if (c && (mottleClickOn.contains(c) || (l && l.control === mottleClickOn))) return "";
				return mottleClicks.length ? "missed; clicks: " + mottleClicks.join("; ") : "missed; no click reached the page";
			})()`)(ctx, t)
			if err != nil || hit == "" || hit == "new document" {
				return nil // an evaluation fails too when the click navigates
			}
			b.t.Logf("click %d on %s at (%.0f, %.0f) %s", try, sel, at[0], at[1], hit)
			if try == 5 {
				return fmt.Errorf("%d clicks on %s did not reach it: %s", try, sel, hit)
			}
		}
	})
}

// step logs the start of a step with the time since the test began,
// after reporting the console errors and failed requests of the steps
// before.
func (b *browser) step(what string) {
	b.t.Helper()
	b.check()
	b.t.Logf("%5.1f s  %s", time.Since(b.start).Seconds(), what)
	b.w.setStep(what)
}

// check fails the test for every console error and failed request seen
// so far that the allow-list does not explain. An evaluation in the page
// first makes sure that the events the page sent before it have been read
// (chromedp.Listen sees an event before the reply that follows it).
func (b *browser) check() {
	b.t.Helper()
	ctx, cancel := b.bounded()
	defer cancel()
	_, _ = chromedp.Run(ctx, chromedp.Evaluate[bool](`true`))
	for _, p := range b.w.take() {
		if p.allowed != nil {
			b.t.Logf("expected in step %q: %s (%s)", p.step, p.text, p.allowed.reason)
			continue
		}
		b.t.Errorf("unexpected in step %q: %s", p.step, p.text)
	}
}

// finish checks the last step and that every allowance was used.
func (b *browser) finish() {
	b.t.Helper()
	b.check()
	if b.t.Failed() {
		return
	}
	for _, a := range b.w.unused() {
		b.t.Errorf("allow-list entry %q (%s) matched nothing: the page no longer does it, remove the entry", a.re, a.reason)
	}
}

// waitBound bounds each wait for the page and each action in it. The
// slowest wait of the browser tests (an analysis of the demo while the
// rest of the suite loads both cores) takes some 20 s; the bound only
// turns a hang into a failure, with its diagnostics, long before the
// package's time limit, and is never reached because the machine is slow.
const waitBound = 2 * time.Minute

// bounded returns a context of b.ctx that ends after waitBound, or at the
// end of the test's time if that is sooner.
func (b *browser) bounded() (context.Context, context.CancelFunc) {
	end := time.Now().Add(waitBound)
	if b.end.Before(end) {
		end = b.end
	}
	return context.WithDeadline(b.ctx, end)
}

func (b *browser) run(what string, actions ...chromedp.Action[chromedp.Void]) {
	b.t.Helper()
	ctx, cancel := b.bounded()
	defer cancel()
	if err := chromedp.Do(ctx, actions...); err != nil {
		b.shot("failure.png", "")
		b.diagnose()
		b.t.Fatalf("%s: %v", what, err)
	}
}

// wait polls the JavaScript condition cond until it is true (waitBound at
// most).
func (b *browser) wait(cond string, msg string) {
	b.t.Helper()
	ctx, cancel := b.bounded()
	defer cancel()
	t0 := time.Now()
	// chromedp's own limit of a poll (30 s by default) is off: ctx bounds it.
	_, err := chromedp.Run(ctx, chromedp.Poll[bool](cond, chromedp.WithPollingInterval(100*time.Millisecond), chromedp.WithPollingTimeout(0)))
	if err != nil {
		tctx, tcancel := context.WithTimeout(b.ctx, 10*time.Second)
		errText, _ := chromedp.Run(tctx, chromedp.Evaluate[string](`document.getElementById("error-box").innerText + " | " + document.getElementById("progress-text").textContent + " | last clicks: " + (window.mottleClicks || []).join("; ")`))
		tcancel()
		b.shot("failure.png", "")
		b.diagnose()
		b.t.Fatalf("%s (%v after %v); page says: %q", msg, err, time.Since(t0).Round(time.Millisecond), errText)
	}
}

// diagnose logs what b.diag says about the server and the goroutines of
// this process that run Mottle's code (the in-process servers' handlers,
// runner and correlator), the whole dump going to the artefacts.
func (b *browser) diagnose() {
	b.t.Helper()
	if b.diag != nil {
		b.t.Logf("server side:\n%s", b.diag())
	}
	var buf bytes.Buffer
	if err := pprof.Lookup("goroutine").WriteTo(&buf, 2); err != nil {
		b.t.Logf("goroutine dump: %v", err)
		return
	}
	p := filepath.Join(b.art, "goroutines.txt")
	if err := os.WriteFile(p, buf.Bytes(), 0o644); err != nil {
		b.t.Logf("goroutine dump: %v", err)
	}
	var ours []string
	for _, g := range strings.Split(buf.String(), "\n\n") {
		if strings.Contains(g, "mottledic/mottle/pkg/") {
			ours = append(ours, g)
		}
	}
	b.t.Logf("%d of the process's goroutines run Mottle's code (all in %s):\n%s", len(ours), p, tail(strings.Join(ours, "\n\n"), 30000))
}

// tryWait reports whether cond becomes true within d; it is only used to
// decide whether to repeat an action, never to fail.
func (b *browser) tryWait(cond string, d time.Duration) bool {
	ctx, cancel := context.WithTimeout(b.ctx, d)
	defer cancel()
	_, err := chromedp.Run(ctx, chromedp.Poll[bool](cond, chromedp.WithPollingInterval(100*time.Millisecond), chromedp.WithPollingTimeout(0)))
	return err == nil
}

// waitResult waits until a result is shown, failing early on an error box.
func (b *browser) waitResult() {
	b.t.Helper()
	b.wait(`document.body.dataset.result === "ready" || !document.getElementById("error-box").hidden`, "no result shown")
	errText := b.str(`document.getElementById("error-box").hidden ? "" : document.getElementById("error-box").innerText`)
	if errText != "" {
		b.shot("failure.png", "")
		b.t.Fatalf("the page shows an error instead of a result: %q", errText)
	}
}

// value evaluates expr in the page and decodes its JSON value.
func value[T any](b *browser, expr string) T {
	b.t.Helper()
	ctx, cancel := b.bounded()
	defer cancel()
	v, err := chromedp.Run(ctx, chromedp.Evaluate[T](helpers+expr))
	if err != nil {
		b.shot("failure.png", "")
		b.diagnose()
		b.t.Fatalf("evaluate %s: %v", expr, err)
	}
	return v
}

func (b *browser) number(expr string) float64 { b.t.Helper(); return value[float64](b, expr) }

func (b *browser) str(expr string) string { b.t.Helper(); return value[string](b, expr) }

// text returns the rendered text of the element sel.
func (b *browser) text(sel string) string {
	b.t.Helper()
	return b.str(fmt.Sprintf(`document.querySelector(%q).innerText`, sel))
}

// eval is an action that evaluates a statement and ignores its value.
func eval(js string) chromedp.Action[chromedp.Void] {
	return chromedp.Func(func(ctx context.Context, t *chromedp.Target) error {
		_, err := chromedp.Evaluate[any](js)(ctx, t)
		return err
	})
}

// helpers are page-side functions the checks use.
const helpers = `var distinctColours = c => { const d = c.getContext('2d').getImageData(0, 0, c.width, c.height).data; const s = new Set(); for (let p = 0; p < d.length; p += 20) s.add((d[p] << 16) | (d[p+1] << 8) | d[p+2]); return s.size; };
`

// centrePoint returns the index of the valid grid point nearest the centre
// of the field.
func (b *browser) centrePoint() int {
	return int(b.number(`(() => {
		const f = mottlePreview.view.field;
		const cx = (f.xs[0] + f.xs[f.nx - 1]) / 2, cy = (f.ys[0] + f.ys[f.ny - 1]) / 2;
		let best = -1, bd = Infinity;
		// A valid point whose eight neighbours are valid too, so that the
		// point is inside the measured area even where the field has holes.
		const inner = k => {
			const i = k % f.nx, j = Math.floor(k / f.nx);
			if (i < 1 || j < 1 || i > f.nx - 2 || j > f.ny - 2) return false;
			for (let dj = -1; dj <= 1; dj++) for (let di = -1; di <= 1; di++) if (!f.ok[k + dj * f.nx + di]) return false;
			return true;
		};
		for (let k = 0; k < f.n; k++) {
			if (!inner(k)) continue;
			const d = (f.X[k] - cx) ** 2 + (f.Y[k] - cy) ** 2;
			if (d < bd) { bd = d; best = k; }
		}
		return best;
	})()`))
}

// fieldSpan returns a horizontal line across the middle of the field, in
// client coordinates.
func (b *browser) fieldSpan() (x0, y0, x1, y1 float64) {
	b.run("scroll to the map", eval(`document.getElementById("map-canvas").scrollIntoView({block: "center"})`))
	p := value[[]float64](b, `(() => {
		const f = mottlePreview.view.field;
		const y = f.ys[Math.floor(f.ny / 2)];
		return [...mottlePreview.toClient(f.xs[1], y), ...mottlePreview.toClient(f.xs[f.nx - 2], y)];
	})()`)
	return p[0], p[1], p[2], p[3]
}

// hover moves the mouse over grid point k and returns the read-out.
func (b *browser) hover(k int) map[string]float64 {
	b.t.Helper()
	if k < 0 {
		b.t.Fatal("the field has no valid point")
	}
	// The page may still be laying itself out (lists of earlier results
	// arrive after the map), so the pointer position is recomputed and the
	// move repeated a few times before the read-out is declared stuck.
	want := fmt.Sprintf(`document.getElementById("readout-where").dataset.k === "%d"`, k)
	for attempt := 0; ; attempt++ {
		b.run("scroll to the map", eval(`document.getElementById("map-canvas").scrollIntoView({block: "center"})`))
		p := value[[]float64](b, fmt.Sprintf(`(() => { const f = mottlePreview.view.field; return mottlePreview.toClient(f.X[%d], f.Y[%d]); })()`, k, k))
		b.run("hover", chromedp.MouseEvent(input.DispatchMouseEventTypeMouseMoved, p[0]-3, p[1]-3), chromedp.MouseEvent(input.DispatchMouseEventTypeMouseMoved, p[0], p[1]))
		if attempt == 2 {
			b.wait(want, "the read-out did not follow the pointer")
			break
		}
		if b.tryWait(want, time.Second) {
			break
		}
	}
	rows := value[[][]string](b, `[...document.querySelectorAll("#readout tbody tr")].map(r => [r.dataset.q, r.cells[1].textContent, r.cells[1].dataset.value])`)
	out := map[string]float64{}
	for _, r := range rows {
		if len(r) != 3 || r[2] == "" {
			continue
		}
		var v float64
		if _, err := fmt.Sscan(r[1], &v); err != nil {
			b.t.Errorf("read-out of %s shows %q, not a number", r[0], r[1])
			continue
		}
		var exact float64
		fmt.Sscan(r[2], &exact)
		// The shown text is rounded to 4 significant digits.
		if math.Abs(v-exact) > 1e-3*math.Abs(exact)+1e-12 {
			b.t.Errorf("read-out of %s shows %q for the value %v", r[0], r[1], exact)
		}
		out[r[0]] = exact
	}
	return out
}

// drag presses the mouse at (x0, y0), moves to (x1, y1) and releases.
func (b *browser) drag(x0, y0, x1, y1 float64) {
	acts := []chromedp.Action[chromedp.Void]{chromedp.MouseEvent(input.DispatchMouseEventTypeMouseMoved, x0, y0),
		chromedp.MouseEvent(input.DispatchMouseEventTypeMousePressed, x0, y0, chromedp.ButtonLeft, chromedp.ClickCount(1))}
	for i := 1; i <= 8; i++ {
		f := float64(i) / 8
		acts = append(acts, chromedp.MouseEvent(input.DispatchMouseEventTypeMouseMoved, x0+f*(x1-x0), y0+f*(y1-y0), chromedp.ButtonLeft))
	}
	acts = append(acts, chromedp.MouseEvent(input.DispatchMouseEventTypeMouseReleased, x1, y1, chromedp.ButtonLeft, chromedp.ClickCount(1)))
	b.run("drag a line", acts...)
}

// shot saves a screenshot of the element sel (the whole page when sel is
// empty) into the artefacts directory.
//
// chromedp's screenshots capture beyond the viewport: the page is laid out
// for a view of the whole page (100vh is then the page's height) and
// returns to its own layout up to a second later, by which time the next
// step may have read where an element is. Measured in the holding server's
// page: after the progress screenshot of checkCancel the run and cancel
// buttons sat 43 px higher for 0.8–1.1 s, then moved back; a cancel click
// read in that state and pressed after the page moved back misses the
// button. So an element's screenshot is taken within the viewport (the
// element scrolled into view, the part in the viewport captured), which
// leaves the layout alone; a screenshot of the whole page still captures
// beyond the viewport, and waits (2 s at most) until the page's size and
// scroll position are those from before.
func (b *browser) shot(name, sel string) {
	ctx, cancel := context.WithTimeout(b.ctx, 15*time.Second)
	defer cancel()
	var buf []byte
	var err error
	if sel == "" {
		const layout = `[document.documentElement.scrollWidth, document.documentElement.scrollHeight, Math.round(scrollX), Math.round(scrollY), innerWidth, innerHeight].join()`
		before, _ := chromedp.Run(ctx, chromedp.Evaluate[string](layout))
		buf, err = chromedp.Run(ctx, chromedp.FullScreenshot(100))
		if before != "" {
			wctx, wcancel := context.WithTimeout(b.ctx, 3*time.Second)
			_, _ = chromedp.Run(wctx, chromedp.Poll[bool](fmt.Sprintf(`%s === %q`, layout, before),
				chromedp.WithPollingInterval(20*time.Millisecond), chromedp.WithPollingTimeout(2*time.Second)))
			wcancel()
		}
	} else {
		buf, err = chromedp.Run(ctx, viewportShot(sel))
	}
	if err != nil {
		b.t.Logf("screenshot %s: %v", name, err)
		return
	}
	b.n++
	p := filepath.Join(b.art, fmt.Sprintf("%02d-%s", b.n, name))
	if err := os.WriteFile(p, buf, 0o644); err != nil {
		b.t.Logf("screenshot %s: %v", name, err)
	}
}

// viewportShot captures the part in the viewport of the first element
// that matches sel, scrolled into view if it is not wholly in it, without
// capturing beyond the viewport (see shot).
func viewportShot(sel string) chromedp.Action[[]byte] {
	return func(ctx context.Context, t *chromedp.Target) ([]byte, error) {
		box, err := chromedp.Evaluate[[]float64](fmt.Sprintf(`(() => {
			const e = document.querySelector(%q);
			if (!e) return [];
			let r = e.getBoundingClientRect();
			if (r.top < 0 || r.bottom > innerHeight || r.left < 0 || r.right > innerWidth) { e.scrollIntoView({block: 'nearest', inline: 'nearest'}); r = e.getBoundingClientRect(); }
			const x0 = Math.max(0, Math.floor(r.left)), y0 = Math.max(0, Math.floor(r.top));
			const x1 = Math.min(innerWidth, Math.ceil(r.right)), y1 = Math.min(innerHeight, Math.ceil(r.bottom));
			return [x0 + scrollX, y0 + scrollY, x1 - x0, y1 - y0];
		})()`, sel))(ctx, t)
		if err != nil {
			return nil, err
		}
		if len(box) != 4 || box[2] <= 0 || box[3] <= 0 {
			return nil, fmt.Errorf("no element %s in the viewport", sel)
		}
		res, err := cdp.Call(ctx, t, page.CaptureScreenshot, page.CaptureScreenshotParams{
			Format: page.CaptureScreenshotFormatPng,
			Clip:   &page.Viewport{X: box[0], Y: box[1], Width: box[2], Height: box[3], Scale: 1},
		})
		if err != nil {
			return nil, err
		}
		return res.Data, nil
	}
}

func setValue(sel, v string) chromedp.Action[chromedp.Void] {
	return eval(fmt.Sprintf(`(() => { const e = document.querySelector(%q); e.value = %q; e.dispatchEvent(new Event('input', {bubbles: true})); e.dispatchEvent(new Event('change', {bubbles: true})); })()`, sel, v))
}

func artifacts(t *testing.T) string {
	dir := os.Getenv("MOTTLE_ARTIFACTS")
	if dir == "" {
		dir = t.TempDir()
	} else {
		dir = filepath.Join(dir, "browser")
		if err := os.MkdirAll(dir, 0o755); err != nil {
			t.Fatalf("artefacts directory: %v", err)
		}
	}
	t.Logf("screenshots go to %s", dir)
	return dir
}

// newBrowser starts a headless Chromium with a fresh profile. The flags
// keep it off the network: without them it tries to reach update and sync
// services and can stall in a closed network.
func newBrowser(t *testing.T) context.Context {
	opts := []chromedp.ExecAllocatorOption{
		chromedp.ExecPath(chromium),
		chromedp.Flag("headless", true),
		chromedp.NoSandbox,
		chromedp.DisableGPU,
		chromedp.NoFirstRun,
		chromedp.NoDefaultBrowserCheck,
		chromedp.Flag("disable-quic", true),
		chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true),
		chromedp.Flag("disable-extensions", true),
		chromedp.Flag("disable-dev-shm-usage", true),
		chromedp.Flag("metrics-recording-only", true),
		chromedp.UserDataDir(t.TempDir()),
		chromedp.WindowSize(1280, 1100),
	}
	actx, cancelA := chromedp.NewExecAllocator(context.Background(), opts...)
	ctx, cancelC := chromedp.NewContext(actx)
	t.Cleanup(func() { cancelC(); cancelA() })
	// Start the browser with a context without a timeout: a timeout on the
	// first run would stop the browser when it ends.
	if err := chromedp.Do(ctx); err != nil {
		t.Fatalf("start %s: %v", chromium, err)
	}
	return ctx
}

// allowance is an entry of a test's allow-list: a console error or failed
// request (matched on its text, see pageWatch) that the test causes on
// purpose, with the reason.
type allowance struct {
	re     *regexp.Regexp
	reason string
}

// pageProblem is a console error or failed request seen on a page.
type pageProblem struct {
	step, text string
	allowed    *allowance
}

// pageWatch collects, for one tab, every uncaught exception, console
// error (console.error and console.assert calls, and error entries of
// the browser log) and failed request (an answer of status 400 or more,
// or a request that failed without one, except those the page itself
// aborted). Their texts read "exception: …", "console error (source): …"
// and "request METHOD URL: status text" or "request METHOD URL: failed:
// net error".
type pageWatch struct {
	allow []allowance

	mu       sync.Mutex
	step     string
	problems []pageProblem
	used     map[int]bool
	requests map[network.RequestID]string // "METHOD URL" of each request
}

// watchPage starts collecting the problems of the tab of ctx.
func watchPage(ctx context.Context, allow []allowance) (*pageWatch, error) {
	w := &pageWatch{allow: allow, step: "open the page", used: map[int]bool{}, requests: map[network.RequestID]string{}}
	err := chromedp.Listen(ctx, func(ev any) {
		switch e := ev.(type) {
		case *network.EventRequestWillBeSent:
			w.mu.Lock()
			w.requests[e.RequestID] = e.Request.Method + " " + e.Request.URL
			w.mu.Unlock()
		case *network.EventResponseReceived:
			if e.Response.Status >= 400 {
				w.add(fmt.Sprintf("request %s: %d %s", w.request(e.RequestID, e.Response.URL), e.Response.Status, e.Response.StatusText))
			}
		case *network.EventLoadingFailed:
			if !e.Canceled {
				w.add(fmt.Sprintf("request %s: failed: %s", w.request(e.RequestID, ""), e.ErrorText))
			}
		case *runtime.EventExceptionThrown:
			d := e.ExceptionDetails
			text := d.Text
			if d.Exception != nil {
				text += " " + d.Exception.Description
			}
			w.add(fmt.Sprintf("exception: %s (%s:%d)", text, d.URL, d.LineNumber))
		case *runtime.EventConsoleAPICalled:
			if e.Type == runtime.ConsoleAPICalledTypeError || e.Type == runtime.ConsoleAPICalledTypeAssert {
				var parts []string
				for _, a := range e.Args {
					if a.Description != "" {
						parts = append(parts, a.Description)
					} else {
						parts = append(parts, strings.Trim(string(a.Value), `"`))
					}
				}
				w.add(fmt.Sprintf("console %s: %s", e.Type, strings.Join(parts, " ")))
			}
		case *cdplog.EventEntryAdded:
			if e.Entry.Level == cdplog.EntryLevelError {
				w.add(fmt.Sprintf("console error (%s): %s %s", e.Entry.Source, e.Entry.Text, e.Entry.URL))
			}
		}
	})
	return w, err
}

func (w *pageWatch) request(id network.RequestID, url string) string {
	w.mu.Lock()
	defer w.mu.Unlock()
	if r, ok := w.requests[id]; ok {
		return r
	}
	return "? " + url
}

func (w *pageWatch) add(text string) {
	text = strings.TrimSpace(text)
	w.mu.Lock()
	defer w.mu.Unlock()
	p := pageProblem{step: w.step, text: text}
	for i := range w.allow {
		if w.allow[i].re.MatchString(text) {
			p.allowed = &w.allow[i]
			w.used[i] = true
			break
		}
	}
	w.problems = append(w.problems, p)
}

func (w *pageWatch) setStep(s string) {
	w.mu.Lock()
	w.step = s
	w.mu.Unlock()
}

// take returns the problems seen since the last call.
func (w *pageWatch) take() []pageProblem {
	w.mu.Lock()
	defer w.mu.Unlock()
	p := w.problems
	w.problems = nil
	return p
}

// unused returns the allowances that matched nothing.
func (w *pageWatch) unused() []allowance {
	w.mu.Lock()
	defer w.mu.Unlock()
	var out []allowance
	for i, a := range w.allow {
		if !w.used[i] {
			out = append(out, a)
		}
	}
	return out
}

// testDeadline is a little before the test binary's -timeout would stop
// the test (20 minutes from now when there is none): no wait goes beyond
// it, and each is bounded by waitBound as well.
func testDeadline(t *testing.T) time.Time {
	if d, ok := t.Deadline(); ok {
		return d.Add(-time.Until(d) / 20)
	}
	return time.Now().Add(20 * time.Minute)
}

// startServer builds cmd/mottle, starts `mottle serve` on a free port of
// 127.0.0.1 with a fresh data directory, waits until /readyz answers and
// returns the base URL. The server is stopped at the end of the test.
func startServer(t *testing.T) string {
	t.Helper()
	bin := filepath.Join(t.TempDir(), "mottle")
	build := exec.Command("go", "build", "-o", bin, "./cmd/mottle")
	build.Dir = ".."
	if out, err := build.CombinedOutput(); err != nil {
		t.Fatalf("build mottle: %v\n%s", err, out)
	}
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	addr := l.Addr().String()
	l.Close()
	logs := &syncBuffer{}
	cmd := exec.Command(bin, "serve", "--addr", addr, "--data", t.TempDir())
	cmd.Stdout, cmd.Stderr = logs, logs
	if err := cmd.Start(); err != nil {
		t.Fatalf("start mottle serve: %v", err)
	}
	exited := make(chan error, 1)
	go func() { exited <- cmd.Wait() }()
	t.Cleanup(func() {
		_ = cmd.Process.Signal(os.Interrupt)
		select {
		case <-exited:
		case <-time.After(10 * time.Second):
			_ = cmd.Process.Kill()
			<-exited
		}
		if t.Failed() {
			t.Logf("server log:\n%s", tail(logs.String(), 4000))
		}
	})
	base := "http://" + addr
	until := time.Now().Add(waitBound)
	if d := testDeadline(t); d.Before(until) {
		until = d
	}
	end, cancel := context.WithDeadline(context.Background(), until)
	defer cancel()
	for {
		select {
		case err := <-exited:
			t.Fatalf("mottle serve exited: %v\n%s", err, logs.String())
		default:
		}
		resp, err := http.Get(base + "/readyz")
		if err == nil {
			resp.Body.Close()
			if resp.StatusCode == http.StatusOK {
				return base
			}
			err = errors.New(resp.Status)
		}
		select {
		case <-end.Done():
			t.Fatalf("mottle serve not ready at %s after %v: %v\n%s", base, waitBound, err, logs.String())
		case <-time.After(100 * time.Millisecond):
		}
	}
}

// syncBuffer collects the server's output from the goroutines of os/exec.
type syncBuffer struct {
	mu  sync.Mutex
	buf bytes.Buffer
}

func (b *syncBuffer) Write(p []byte) (int, error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.buf.Write(p)
}

func (b *syncBuffer) String() string {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.buf.String()
}

func tail(s string, n int) string {
	if len(s) > n {
		return "…" + s[len(s)-n:]
	}
	return s
}

// checkLargePreview has the page decode the image check's preview of a
// 64-megapixel (8000 × 8000 px) 16-bit frame, as app.js does with the
// service's answer (createImageBitmap of the PNG), and checks that the
// browser reads a bitmap of at most service.PreviewMaxPx a side.
func checkLargePreview(b *browser) {
	t := b.t
	t.Helper()
	g := imageio.NewGray(8000, 8000)
	g.Bits = 16
	for y := 0; y < g.H; y++ {
		for x := 0; x < g.W; x++ {
			g.Pix[y*g.Stride+x] = float32(1000 + 2000*((x/16+y/16)%2))
		}
	}
	png, w, h, err := service.PreviewPNG(g, 1000, 3000)
	if err != nil {
		t.Fatal(err)
	}
	js := fmt.Sprintf(`fetch("data:image/png;base64,%s").then(r => r.blob()).then(createImageBitmap).then(bm => [bm.width, bm.height])`,
		base64.StdEncoding.EncodeToString(png))
	ctx, cancel := b.bounded()
	defer cancel()
	got, err := chromedp.Run(ctx, chromedp.Evaluate[[]int](js, chromedp.EvalAwaitPromise))
	if err != nil {
		t.Fatalf("the browser does not decode the preview: %v", err)
	}
	if len(got) != 2 || got[0] != w || got[1] != h || max(w, h) > service.PreviewMaxPx {
		t.Errorf("the browser decodes the 64 Mpx preview as %v, want %d×%d within %d px", got, w, h, service.PreviewMaxPx)
	}
}

package web_test

// Browser tests of the workspace: a whole test series run from dropped
// files, an interrupted upload resumed after a reload, the list of earlier
// work (open, rename, delete), the wide-screen layout at two window sizes
// and the colour equality of the page and the server's PNG maps.

import (
	"bytes"
	"context"
	"encoding/base64"
	"encoding/json"
	"fmt"
	"image/color"
	"image/png"
	"io"
	"math"
	"net/http"
	"net/url"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// Specimen of the invented series: a coupon of 12.5 mm² cross-section of
// a material with E = 70 000 MPa and ν = 0.3, stretched homogeneously.
const (
	wsE    = 70000.0
	wsNu   = 0.3
	wsArea = 12.5
	wsW    = 160
	wsH    = 128
)

// wsStrains are the axial engineering strains of the five frames.
var wsStrains = []float64{0.001, 0.002, 0.003, 0.004, 0.005}

func TestBrowserWorkspace(t *testing.T) {
	if _, err := os.Stat(chromium); err != nil {
		t.Fatalf("the browser tests need Debian's chromium at %s; install it with `apt-get install chromium` (%v)", chromium, err)
	}
	art := artifacts(t)
	base := startServer(t)
	ctx := newBrowser(t)
	b := newPage(t, ctx, art, nil)
	b.run("load the page at 1280×800", chromedp.EmulateViewport(1280, 800), chromedp.Navigate(base+"/"), chromedp.WaitVisible(chromedp.ID("s-start")))
	b.wait(`document.body.dataset.ready === "true"`, "the page's script did not start")

	b.step("colour maps: the page and the server's map.png agree")
	aid := postTranslation(b, base, "Translation check")
	checkColourEquality(b, base, aid)

	b.step("layout: map and controls together at 1280×800 and 1024×768")
	checkLayout(b, 1280, 800)
	checkLayout(b, 1024, 768)
	checkTablet(b, 768, 1024)
	b.run("back to 1280×800", chromedp.EmulateViewport(1280, 800))

	files := seriesFiles(b)
	b.step("a five-frame series from dropped files and a load table")
	full := runSeries(b, base, files)

	b.step("an interrupted upload resumes after a reload")
	resumed := resumeSeries(b, base, files)
	a, c := curveOf(b, base, full), curveOf(b, base, resumed)
	if len(a) != len(c) || len(a) != len(wsStrains) {
		t.Fatalf("curve.json: %d frames uninterrupted, %d resumed, want %d", len(a), len(c), len(wsStrains))
	}
	for i := range a {
		if a[i].Time == nil || c[i].Time == nil || *a[i].Time != *c[i].Time || a[i].Load == nil || c[i].Load == nil || *a[i].Load != *c[i].Load {
			t.Errorf("frame %d: time/load %v/%v uninterrupted, %v/%v resumed", i, a[i].Time, a[i].Load, c[i].Time, c[i].Load)
		}
		for k, v := range a[i].Mean {
			if w := c[i].Mean[k]; w != v {
				t.Errorf("frame %d: mean %s %v uninterrupted, %v resumed", i, k, v, w)
			}
		}
		for k, v := range a[i].Gauges {
			if w := c[i].Gauges[k]; w != v {
				t.Errorf("frame %d: %s %v uninterrupted, %v resumed", i, k, v, w)
			}
		}
	}
	pa, pc := propsOf(b, base, full), propsOf(b, base, resumed)
	if pa.Properties.Modulus == nil || pc.Properties.Modulus == nil || pa.Properties.Modulus.E != pc.Properties.Modulus.E {
		t.Errorf("modulus uninterrupted %+v, resumed %+v: want the same", pa.Properties.Modulus, pc.Properties.Modulus)
	}

	b.step("earlier work: named items, open, rename, delete")
	checkShelf(b, base, aid, full, resumed)
	b.finish()
}

// postTranslation posts an analysis of a rigid 2 px shift through the API
// and waits for it: u = 2 px and F11 = 1 at every point.
func postTranslation(b *browser, base, name string) string {
	t := b.t
	t.Helper()
	ref, def, err := synth.Pair(synth.PatternOptions{Diameter: 4, Seed: 21}, synth.Translation{U: 2}, synth.RenderOptions{W: wsW, H: wsH, Bits: 8})
	if err != nil {
		t.Fatal(err)
	}
	var body bytes.Buffer
	ct := multipartImages(t, &body, map[string]*imageio.Gray{"reference": ref, "deformed": def}, `{"subset": 21, "step": 8}`)
	resp, err := http.Post(base+"/v1/analyses?wait=true&name="+url.QueryEscape(name), ct, &body)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	var j struct{ ID, State, Name string }
	if err := json.NewDecoder(resp.Body).Decode(&j); err != nil || j.State != "succeeded" || j.Name != name {
		t.Fatalf("analysis of the shift: %s %+v %v", resp.Status, j, err)
	}
	return j.ID
}

func multipartImages(t *testing.T, w io.Writer, imgs map[string]*imageio.Gray, params string) string {
	t.Helper()
	var parts []string
	var mb bytes.Buffer
	boundary := "mottleworkspace"
	for _, name := range []string{"reference", "deformed"} {
		var png bytes.Buffer
		if err := imageio.WritePNG(&png, imgs[name], 8); err != nil {
			t.Fatal(err)
		}
		parts = append(parts, fmt.Sprintf("--%s\r\nContent-Disposition: form-data; name=%q; filename=%q\r\nContent-Type: image/png\r\n\r\n%s\r\n", boundary, name, name+".png", png.String()))
	}
	parts = append(parts, fmt.Sprintf("--%s\r\nContent-Disposition: form-data; name=\"params\"\r\nContent-Type: application/json\r\n\r\n%s\r\n--%s--\r\n", boundary, params, boundary))
	mb.WriteString(strings.Join(parts, ""))
	if _, err := w.Write(mb.Bytes()); err != nil {
		t.Fatal(err)
	}
	return "multipart/form-data; boundary=" + boundary
}

// shelfSettled is true when no reload of the list of earlier work is under
// way (shelf.js counts them in the list's data-pending).
const shelfSettled = `document.getElementById('work-list').dataset.pending === '0'`

// openFromShelf clicks Open on the list item with that id.
func openFromShelf(b *browser, id string) {
	b.t.Helper()
	b.run("refresh the list", b.click("#shelf-refresh"))
	sel := fmt.Sprintf(`#work-list .work-item[data-id="%s"]`, id)
	// Wait for the reload to be drawn: a click on an item of the list
	// being replaced finds no node.
	b.wait(fmt.Sprintf(`%s && !!document.querySelector('%s')`, shelfSettled, sel), "the item is not in the list of earlier work")
	b.run("open it from the list", eval(`document.body.dataset.result = ""`), b.click(sel+" .work-acts button"))
	b.waitResult()
}

// checkColourEquality opens the shifted pair in the page, draws u and F11
// opaque with chosen ranges, and compares the canvas colour at a measured
// point with the colour that covers the map area of the server's map.png
// with the same range: within 1 unit of 8-bit RGB. The ranges put the
// values at different places along the maps, both halves of the diverging
// one included (two-slope normalisation about zero).
func checkColourEquality(b *browser, base, id string) {
	t := b.t
	t.Helper()
	openFromShelf(b, id)
	b.run("opaque, automatic colour map", setValue("#opacity", "1"), setValue("#cmap-select", "auto"))
	k := b.centrePoint()
	for _, tc := range []struct {
		q      string
		lo, hi float64
		cmap   string
	}{
		{"u", 1, 5, "coolwarm"},
		{"u", -1, 2.5, "coolwarm"},
		{"u", -6, 10, "coolwarm"},
		{"F11", 0.5, 1.5, "viridis"},
		{"F11", 0.9, 1.3, "viridis"},
		{"F11", 0.95, 1.01, "viridis"},
	} {
		b.run("choose "+tc.q, setValue("#q-select", tc.q), setValue("#r-min", fmt.Sprint(tc.lo)), setValue("#r-max", fmt.Sprint(tc.hi)))
		got := value[[]float64](b, fmt.Sprintf(`(() => {
			const v = mottlePreview.view, f = v.field, k = %d;
			v.setHover(-1); v.render();
			const x = Math.floor((f.X[k] + 0.5) * v.s), y = Math.floor((f.Y[k] + 0.5) * v.s);
			const d = v.canvas.getContext('2d').getImageData(x, y, 1, 1).data;
			return [d[0], d[1], d[2], f.value(%q, k), v.mapName() === %q ? 1 : 0];
		})()`, k, tc.q, tc.cmap))
		if got[4] != 1 {
			t.Errorf("%s: the page does not use %s, the server's map for it", tc.q, tc.cmap)
		}
		want := modalColour(t, base, id, tc.q, tc.lo, tc.hi)
		t.Logf("%s = %.5g over [%g, %g] (%s): page rgb(%v, %v, %v), map.png rgb(%d, %d, %d)", tc.q, got[3], tc.lo, tc.hi, tc.cmap, got[0], got[1], got[2], want[0], want[1], want[2])
		for c := 0; c < 3; c++ {
			if math.Abs(got[c]-float64(want[c])) > 1 {
				t.Errorf("%s over [%g, %g]: page rgb(%v, %v, %v), map.png rgb(%d, %d, %d): more than 1 unit apart", tc.q, tc.lo, tc.hi, got[0], got[1], got[2], want[0], want[1], want[2])
				break
			}
		}
	}
	b.run("default range and opacity", setValue("#opacity", "0.8"), b.click("#btn-autorange"))
}

// modalColour fetches map.png of quantity q with range [lo, hi] and
// returns the most frequent colour among its coloured pixels: in a uniform
// field, the colour of the whole map area (the grey image, the white
// margins and the many colours of the colour bar are left out or rarer).
func modalColour(t *testing.T, base, id, q string, lo, hi float64) [3]uint8 {
	t.Helper()
	resp, err := http.Get(fmt.Sprintf("%s/v1/analyses/%s/map.png?quantity=%s&range=%g,%g", base, id, q, lo, hi))
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	img, err := png.Decode(resp.Body)
	if err != nil || resp.StatusCode != 200 {
		t.Fatalf("map.png of %s: %s %v", q, resp.Status, err)
	}
	count := map[[3]uint8]int{}
	r := img.Bounds()
	for y := r.Min.Y; y < r.Max.Y; y++ {
		for x := r.Min.X; x < r.Max.X; x++ {
			cr, cg, cb, _ := color.RGBAModel.Convert(img.At(x, y)).RGBA()
			p := [3]uint8{uint8(cr >> 8), uint8(cg >> 8), uint8(cb >> 8)}
			if max(p[0], p[1], p[2])-min(p[0], p[1], p[2]) < 8 {
				continue // grey: the image or the page
			}
			count[p]++
		}
	}
	var best [3]uint8
	n := 0
	for p, c := range count {
		if c > n {
			best, n = p, c
		}
	}
	if n < 1000 {
		t.Fatalf("map.png of %s over [%g, %g]: no uniform map area (the most frequent colour covers %d px)", q, lo, hi, n)
	}
	return best
}

// checkLayout sets the window size, opens the shown map's results and
// checks that the map canvas and the controls that change it are all in
// view together, the controls beside the map; it saves a screenshot of the
// window.
func checkLayout(b *browser, w, h int64) {
	t := b.t
	t.Helper()
	b.run(fmt.Sprintf("window %d×%d", w, h), chromedp.EmulateViewport(w, h), eval(`window.dispatchEvent(new Event('resize'))`),
		eval(`document.querySelector('#results .viewer-grid').scrollIntoView({block: 'start'})`))
	out := value[[]string](b, `(() => {
		const vw = innerWidth, vh = innerHeight, bad = [];
		const m = document.getElementById('map-canvas').getBoundingClientRect();
		if (m.top < -1 || m.bottom > vh + 1 || m.left < 0 || m.right > vw) bad.push('map ' + JSON.stringify(m));
		if (m.width < 0.45 * vw) bad.push('map only ' + Math.round(m.width) + ' px wide');
		for (const id of ['q-select', 'cmap-select', 'r-min', 'r-max', 'btn-autorange', 'opacity', 'smooth', 'vectors']) {
			const r = document.getElementById(id).getBoundingClientRect();
			if (r.top < -1 || r.bottom > vh + 1 || r.left < 0 || r.right > vw || r.width === 0) bad.push(id + ' out of view ' + JSON.stringify(r));
			else if (r.left < m.right - 2) bad.push(id + ' not beside the map');
		}
		return bad;
	})()`)
	for _, s := range out {
		t.Errorf("%d×%d: %s", w, h, s)
	}
	ctx, cancel := context.WithTimeout(b.ctx, 15e9)
	defer cancel()
	buf, err := chromedp.Run(ctx, chromedp.CaptureScreenshot())
	if err != nil {
		t.Fatalf("screenshot: %v", err)
	}
	b.n++
	p := filepath.Join(b.art, fmt.Sprintf("%02d-layout-%dx%d.png", b.n, w, h))
	if err := os.WriteFile(p, buf, 0o644); err != nil {
		t.Fatal(err)
	}
	cfg, err := png.DecodeConfig(bytes.NewReader(buf))
	if err != nil || int64(cfg.Width) != w || int64(cfg.Height) != h {
		t.Errorf("screenshot %s: %v×%v (%v), want the %d×%d window", p, cfg.Width, cfg.Height, err, w, h)
	}
}

// checkTablet sets an upright tablet window: nothing may stick out to the
// side, the map must fill most of the width, and the controls follow
// under it.
func checkTablet(b *browser, w, h int64) {
	t := b.t
	t.Helper()
	b.run(fmt.Sprintf("window %d×%d", w, h), chromedp.EmulateViewport(w, h, chromedp.EmulateTouch), eval(`window.dispatchEvent(new Event('resize'))`),
		eval(`document.querySelector('#results .viewer-grid').scrollIntoView({block: 'start'})`))
	out := value[[]string](b, `(() => {
		const vw = innerWidth, bad = [];
		if (document.scrollingElement.scrollWidth > vw + 1) bad.push('the page is ' + document.scrollingElement.scrollWidth + ' px wide');
		const m = document.getElementById('map-canvas').getBoundingClientRect();
		if (m.width < 0.6 * vw || m.right > vw) bad.push('map ' + JSON.stringify(m));
		const q = document.getElementById('q-select').getBoundingClientRect();
		if (q.top < m.bottom - 2 || q.right > vw) bad.push('quantity control not under the map ' + JSON.stringify(q));
		return bad;
	})()`)
	for _, s := range out {
		t.Errorf("%d×%d: %s", w, h, s)
	}
	b.shot(fmt.Sprintf("layout-tablet-%dx%d.png", w, h), "#results")
}

// wsFile is a frame file handed to the page.
type wsFile struct {
	Name string `json:"name"`
	Data string `json:"data"` // base64
	Type string `json:"type"`
}

// seriesFiles renders the reference and the five frames: F11 = 1 + a,
// F22 = 1 − ν a (a homogeneous uniaxial stretch), named with their time
// stamps (step_t0s … step_t10s, so that name order needs the natural
// order: t10 after t8), and the load table (name, load in kN) with
// load = E · A · a (Hooke's law).
func seriesFiles(b *browser) []wsFile {
	t := b.t
	t.Helper()
	pat, err := synth.NewPattern(synth.PatternOptions{Diameter: 4, Seed: 17, Bounds: synth.ImageRect(wsW, wsH, 30)})
	if err != nil {
		t.Fatal(err)
	}
	render := func(m synth.Motion) string {
		g, _, err := synth.Render(pat, m, synth.RenderOptions{W: wsW, H: wsH, Bits: 8})
		if err != nil {
			t.Fatal(err)
		}
		var buf bytes.Buffer
		if err := imageio.WritePNG(&buf, g, 8); err != nil {
			t.Fatal(err)
		}
		return base64.StdEncoding.EncodeToString(buf.Bytes())
	}
	out := []wsFile{{Name: "step_t0s.png", Data: render(synth.Identity{}), Type: "image/png"}}
	csv := "# invented coupon A7, Brackwater Materials Lab\nname,load_kN\nstep_t0s.png,0\n"
	for i, a := range wsStrains {
		m := synth.Affine{F: [2][2]float64{{1 + a, 0}, {0, 1 - wsNu*a}}, CX: wsW / 2, CY: wsH / 2}
		name := fmt.Sprintf("step_t%ds.png", 2*(i+1))
		out = append(out, wsFile{Name: name, Data: render(m), Type: "image/png"})
		csv += fmt.Sprintf("%s,%g\n", name, wsE*wsArea*a/1000)
	}
	// Dropped in a shuffled order: the page must sort them.
	out[1], out[5], out[3] = out[5], out[3], out[1]
	out = append(out, wsFile{Name: "loads.csv", Data: base64.StdEncoding.EncodeToString([]byte(csv)), Type: "text/csv"})
	return out
}

// dropFrames drops the image files on the series drop zone and chooses
// the CSV as the load table.
func dropFrames(b *browser, files []wsFile) {
	b.t.Helper()
	doc, _ := json.Marshal(files)
	b.run("drop the frames and choose the load table", eval(fmt.Sprintf(`(() => {
		const fs = %s.map(f => new File([Uint8Array.from(atob(f.data), c => c.charCodeAt(0))], f.name, {type: f.type}));
		const imgs = new DataTransfer(), tbl = new DataTransfer();
		for (const f of fs) (f.name.endsWith('.csv') ? tbl : imgs).items.add(f);
		document.getElementById('drop-series').dispatchEvent(new DragEvent('drop', {dataTransfer: imgs, bubbles: true, cancelable: true}));
		const inp = document.getElementById('s-table'); inp.files = tbl.files;
		inp.dispatchEvent(new Event('change', {bubbles: true}));
	})()`, doc)))
	b.wait(`/6 images: reference step_t0s\.png, frames step_t2s\.png … step_t10s\.png/.test(document.getElementById('series-info').textContent)`, "the dropped frames were not taken in the CLI's order")
}

// setUpSeries names the series, draws the axial extensometer by typing its
// ends (the keyboard way) and the transverse one by dragging on the
// reference (the pointer way), and sets the area, time stamps and fit
// ranges.
func setUpSeries(b *browser, name string) {
	b.t.Helper()
	b.run("name, time stamps from the names, area and ranges",
		setValue("#s-name", name), setValue("#s-times", "pattern"), setValue("#s-pattern", "_t([0-9.]+)s"), setValue("#s-tscale", "1"),
		setValue("#s-subset", "21"), setValue("#s-step", "8"), setValue("#s-area", fmt.Sprint(wsArea)),
		setValue("#g-kind", "ext"), setValue("#g-x0", "30"), setValue("#g-y0", "64"), setValue("#g-x1", "130"), setValue("#g-y1", "64"),
		b.click("#g-add"))
	// Under a heavy load the page may still be laying out the reference
	// when the first drag arrives, so that it adds nothing; the drag is
	// then measured and sent again (at most three times), never when it
	// added a gauge.
	for try := 1; ; try++ {
		b.run("scroll to the reference", eval(`document.getElementById('gauge-canvas').scrollIntoView({block: 'center'})`))
		p := value[[]float64](b, `(() => { const c = document.getElementById('gauge-canvas'), r = c.getBoundingClientRect(), s = mottlePreview.runner.s * r.width / c.width;
		return [r.left + 80 * s, r.top + 24 * s, r.left + 80 * s, r.top + 104 * s]; })()`)
		b.drag(p[0], p[1], p[2], p[3])
		if try == 3 || b.tryWait(`mottlePreview.runner.items.length !== 1`, 10*time.Second) {
			break
		}
		b.t.Logf("drag %d on the reference added nothing; measuring and dragging again", try)
	}
	b.wait(`mottlePreview.runner.items.length === 2 && mottlePreview.runner.items[1].name === 'ext2'`, "dragging on the reference did not add the transverse extensometer")
	got := value[[]float64](b, `mottlePreview.runner.items[1].a.concat(mottlePreview.runner.items[1].b)`)
	for i, w := range []float64{80, 24, 80, 104} {
		if math.Abs(got[i]-w) > 1.5 {
			b.t.Errorf("dragged extensometer ends %v, want (80, 24) → (80, 104) within 1.5 px", got)
			break
		}
	}
	b.run("strain sources and fit ranges", setValue("#s-axial", "ext1"), setValue("#s-trans", "ext2"),
		setValue("#s-mod-lo", "0.0005"), setValue("#s-mod-hi", "0.0055"), setValue("#s-poi-lo", "0.0005"), setValue("#s-poi-hi", "0.0055"))
}

// runSeries runs the whole series from the page and checks the curve, the
// modulus and the report against the API and against Hooke's law.
func runSeries(b *browser, base string, files []wsFile) string {
	t := b.t
	t.Helper()
	dropFrames(b, files)
	setUpSeries(b, "Coupon A7 tension")
	b.run("start", eval(`delete document.body.dataset.props`), b.click("#s-start"))
	b.wait(`document.body.dataset.props === 'ready' && /all 5 frames done/.test(document.getElementById('s-progress-text').textContent)`, "the series did not finish")
	if v := b.number(`document.getElementById('s-all-progress').value / document.getElementById('s-all-progress').max`); v != 1 {
		t.Errorf("overall progress %v at the end, want 1", v)
	}
	id := b.str(`mottlePreview.state.series.id`)
	b.shot("series-run.png", "#series")

	// The curve on the page is curve.json.
	api := curveOf(b, base, id)
	page := value[[]map[string]float64](b, `mottlePreview.state.curve.map(r => Object.fromEntries(Object.entries(r).filter(([k, v]) => Number.isFinite(v))))`)
	if len(page) != len(api) || len(api) != len(wsStrains) {
		t.Fatalf("page curve has %d frames, curve.json %d, want %d", len(page), len(api), len(wsStrains))
	}
	for i, r := range api {
		if r.Time == nil || page[i]["time"] != *r.Time || *r.Time != float64(2*(i+1)) {
			t.Errorf("frame %d: page time %v, curve.json %v, want %d s from the name", i, page[i]["time"], r.Time, 2*(i+1))
		}
		// Loads from the table in kN, sent in N.
		if want := wsE * wsArea * wsStrains[i]; r.Load == nil || page[i]["load"] != *r.Load || math.Abs(*r.Load-want) > 1e-9*want {
			t.Errorf("frame %d: page load %v, curve.json %v, table %v N", i, page[i]["load"], r.Load, want)
		}
		for k, v := range r.Mean {
			if page[i]["mean "+k] != v {
				t.Errorf("frame %d: page mean %s %v, curve.json %v", i, k, page[i]["mean "+k], v)
			}
		}
	}
	// The modulus shown is the API's, and close to the specimen's.
	pr := propsOf(b, base, id)
	m := pr.Properties.Modulus
	if m == nil {
		t.Fatalf("properties.json has no modulus: %+v", pr)
	}
	shown := b.number(`+document.getElementById('props').dataset.modulus`)
	text := b.text("#props")
	if shown != m.E || !strings.Contains(text, "ASTM E111") || !strings.Contains(text, "R²") {
		t.Errorf("page shows E = %v (%q), properties.json E = %v; want the same, with the standard and the fit quality", shown, text, m.E)
	}
	// Hooke's law: stress = E ε for the invented specimen; the
	// extensometer reads the stretch of the homogeneous field, so the fit
	// finds E up to the correlation error of a 100 px extensometer.
	if math.Abs(m.E-wsE) > 0.03*wsE {
		t.Errorf("Young's modulus %.0f MPa, the specimen's is %.0f MPa (want within 3 %%)", m.E, wsE)
	}
	if p := pr.Properties.Poisson; p == nil || math.Abs(p.Nu-wsNu) > 0.05 {
		t.Errorf("Poisson's ratio %+v, the specimen's is %g (want within 0.05)", p, wsNu)
	}
	t.Logf("series %s: E = %.0f MPa (specimen %.0f), ν = %+v", id, m.E, wsE, pr.Properties.Poisson)
	// The report opens, with the name and the modulus line.
	b.run("open the report", eval(`window.reportText = null; (async () => { const a = document.getElementById('report-open'); const r = await fetch(a.href); window.reportText = a.target + ' ' + r.status + ' ' + (await r.text()); })()`))
	b.wait(`typeof window.reportText === 'string'`, "the report did not load")
	rep := b.str(`window.reportText`)
	if !strings.HasPrefix(rep, "_blank 200 ") || !strings.Contains(rep, "<title>Coupon A7 tension</title>") || !strings.Contains(rep, "ASTM E111") {
		t.Errorf("report: %.300q", rep)
	}
	if dl := b.str(`document.getElementById('report-download').getAttribute('download') + ' ' + document.getElementById('report-download').href`); !strings.HasPrefix(dl, "report.html ") || !strings.HasSuffix(dl, "report.html?download=true") {
		t.Errorf("report download link %q", dl)
	}
	checkMapDrawn(b)
	return id
}

// resumeSeries starts the same series again, reloads the page once three
// frames are done, drops the same files and resumes.
func resumeSeries(b *browser, base string, files []wsFile) string {
	t := b.t
	t.Helper()
	b.run("reload for a fresh page", chromedp.Reload())
	b.wait(`document.body.dataset.ready === "true"`, "the page's script did not start")
	dropFrames(b, files)
	setUpSeries(b, "Coupon A7 resumed")
	b.run("start", b.click("#s-start"))
	b.wait(`+(document.body.dataset.seriesDone || 0) >= 3`, "three frames did not finish")
	id := b.str(`mottlePreview.state.series.id`)
	b.run("reload the page mid-way", chromedp.Reload())
	b.wait(`document.body.dataset.ready === "true"`, "the page's script did not start after the reload")
	if s := b.str(`document.getElementById('s-pending').hidden ? '' : document.getElementById('s-pending').textContent`); !strings.Contains(s, "Coupon A7 resumed") || !strings.Contains(s, "Choose the same 6 files") {
		t.Errorf("after the reload the page says %q, want the stopped upload and what to do", s)
	}
	dropFrames(b, files)
	b.wait(`!document.getElementById('s-resume').hidden && !document.getElementById('s-resume').disabled`, "the resume button is not offered for the same files")
	b.run("resume", chromedp.Focus(chromedp.ID("s-resume")), chromedp.KeyEvent("\r"))
	b.wait(`document.body.dataset.props === 'ready' && /all 5 frames done/.test(document.getElementById('s-progress-text').textContent)`, "the resumed series did not finish")
	if got := b.str(`mottlePreview.state.series.id`); got != id {
		t.Errorf("resumed into series %s, want %s", got, id)
	}
	if n := b.number(`localStorage.length`); n != 0 {
		t.Errorf("the finished upload left %v records in localStorage", n)
	}
	return id
}

type wsCurveRow struct {
	Time   *float64           `json:"time"`
	Load   *float64           `json:"load"`
	State  string             `json:"state"`
	Mean   map[string]float64 `json:"mean"`
	Gauges map[string]float64 `json:"gauges"`
}

func curveOf(b *browser, base, id string) []wsCurveRow {
	var doc struct {
		Frames []wsCurveRow `json:"frames"`
	}
	getJSON(b.t, base+"/v1/series/"+id+"/curve.json", &doc)
	return doc.Frames
}

type wsProps struct {
	Properties struct {
		Modulus *struct {
			E float64 `json:"E"`
		} `json:"youngs_modulus"`
		Poisson *struct {
			Nu float64 `json:"nu"`
		} `json:"poissons_ratio"`
		Skipped map[string]string `json:"skipped"`
	} `json:"properties"`
}

func propsOf(b *browser, base, id string) wsProps {
	var p wsProps
	getJSON(b.t, base+"/v1/series/"+id+"/properties.json", &p)
	return p
}

func getJSON(t *testing.T, u string, v any) {
	t.Helper()
	resp, err := http.Get(u)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	if resp.StatusCode != 200 {
		t.Fatalf("GET %s: %s", u, resp.Status)
	}
	if err := json.NewDecoder(resp.Body).Decode(v); err != nil {
		t.Fatalf("GET %s: %v", u, err)
	}
}

// checkShelf: the list shows the named analysis and series with their
// thumbnails; opening each shows its map; renaming by keyboard reaches the
// server; delete removes an item from the server.
func checkShelf(b *browser, base, aid, full, resumed string) {
	t := b.t
	t.Helper()
	b.run("refresh the list", b.click("#shelf-refresh"))
	b.wait(shelfSettled+` && document.querySelectorAll('#work-list .work-item').length >= 3 && [...document.querySelectorAll('#work-list img')].every(i => i.complete && i.naturalWidth > 0)`, "the list or its thumbnails did not load")
	names := value[map[string]string](b, `Object.fromEntries([...document.querySelectorAll('#work-list .work-item')].map(li => [li.dataset.id, li.dataset.kind + ': ' + li.querySelector('.work-name').textContent + ' | ' + li.querySelector('.work-meta').textContent]))`)
	for id, want := range map[string]string{aid: "analysis: Translation check", full: "series: Coupon A7 tension", resumed: "series: Coupon A7 resumed"} {
		if !strings.HasPrefix(names[id], want) || !strings.Contains(names[id], "160 × 128 px") {
			t.Errorf("list item %s: %q, want %q with its size", id, names[id], want)
		}
	}
	b.shot("earlier-work.png", "#shelf")
	openFromShelf(b, aid)
	// u (2 px everywhere) rather than the strains: zero strain is the
	// grey centre of the diverging map, which the check cannot tell from
	// the bare image.
	b.run("show u", setValue("#q-select", "u"))
	checkMapDrawn(b)
	b.wait(shelfSettled, "the list of earlier work did not settle")
	b.run("open the series from the list", eval(`document.body.dataset.result = ""`),
		b.click(fmt.Sprintf(`#work-list .work-item[data-id="%s"] .work-acts button`, full)))
	b.waitResult()
	b.wait(`/Coupon A7 tension/.test(document.getElementById('series-title').textContent)`, "the series did not open from the list")
	checkMapDrawn(b)

	item := fmt.Sprintf(`#work-list .work-item[data-id="%s"]`, resumed)
	b.wait(shelfSettled, "the list of earlier work did not settle")
	b.run("rename by keyboard", b.click(item+` .work-acts button:nth-child(2)`),
		eval(fmt.Sprintf(`document.querySelector('%s .rename input').value = ''`, item)),
		chromedp.SendKeys(chromedp.CSS(item+" .rename input"), "Coupon A7, second pull"),
		chromedp.KeyEvent("\r"))
	b.wait(fmt.Sprintf(`document.querySelector('%s .work-name').textContent === 'Coupon A7, second pull' && !document.querySelector('%s .rename')`, item, item), "the new name was not taken")
	var sr struct{ Name string }
	getJSON(t, base+"/v1/series/"+resumed, &sr)
	if sr.Name != "Coupon A7, second pull" {
		t.Errorf("server has the name %q after renaming", sr.Name)
	}
	b.run("delete, then confirm", b.click(item+` .work-acts button:nth-child(3)`), b.click(item+` .work-acts button:nth-child(3)`))
	b.wait(fmt.Sprintf(`!document.querySelector('%s')`, item), "the deleted item stays in the list")
	resp, err := http.Get(base + "/v1/series/" + resumed)
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusNotFound {
		t.Errorf("GET the deleted series: %s, want 404", resp.Status)
	}
}

package web_test

// Browser test of the live gauges: a series sent through the live route
// from the page plots its extensometer and gauge readings as each frame is
// answered, and a page opened later follows frames that another client
// posts, through the live event stream.

import (
	"bytes"
	"encoding/base64"
	"fmt"
	"math"
	"net/http"
	"os"
	"strings"
	"testing"

	"github.com/chromedp/chromedp"
)

func TestBrowserLive(t *testing.T) {
	if _, err := os.Stat(chromium); err != nil {
		t.Fatalf("the browser tests need Debian's chromium at %s; install it with `apt-get install chromium` (%v)", chromium, err)
	}
	art := artifacts(t)
	base := startServer(t)
	ctx := newBrowser(t)
	b := newPage(t, ctx, art, nil)
	b.run("load the page", chromedp.EmulateViewport(1280, 800), chromedp.Navigate(base+"/"), chromedp.WaitVisible(chromedp.ID("s-start")))
	b.wait(`document.body.dataset.ready === "true"`, "the page's script did not start")

	b.step("a five-frame series sent live from the page")
	files := seriesFiles(b)
	dropFrames(b, files)
	b.run("name, time stamps, an extensometer and a gauge area, live",
		setValue("#s-name", "Coupon A7 live"), setValue("#s-times", "pattern"), setValue("#s-pattern", "_t([0-9.]+)s"), setValue("#s-tscale", "1"),
		setValue("#s-subset", "21"), setValue("#s-step", "8"),
		setValue("#g-kind", "ext"), setValue("#g-x0", "30"), setValue("#g-y0", "64"), setValue("#g-x1", "130"), setValue("#g-y1", "64"),
		b.click("#g-add"),
		setValue("#g-kind", "gauge"), setValue("#g-x0", "48"), setValue("#g-y0", "40"), setValue("#g-x1", "112"), setValue("#g-y1", "88"),
		b.click("#g-add"),
		b.click("#s-live"))
	b.run("start", eval(`delete document.body.dataset.props`), b.click("#s-start"))
	b.wait(`document.getElementById('live-text').dataset.frames === '5' && /all 5 frames done/.test(document.getElementById('s-progress-text').textContent)`,
		"the live plot did not get the five frames")
	id := b.str(`mottlePreview.state.series.id`)

	// The plotted readings: the first two (the extensometer and the
	// gauge's first component), one point per frame, against time.
	if pts := b.str(`document.getElementById('live-canvas').dataset.points`); pts != "5,5" {
		t.Errorf("live plot draws %q points per line, want 5,5 (extensometer and gauge)", pts)
	}
	if n := b.number(`distinctColours(document.getElementById('live-canvas'))`); n < 4 {
		t.Errorf("live plot has %v colours, want two coloured lines on the axes", n)
	}
	// The extensometer reads the applied engineering strain a of the
	// homogeneous stretch F11 = 1 + a (exact by construction of the
	// rendered frames, pkg/synth), within 5e-4 as the series tests allow
	// a two-point reading; the time comes from the name, the load from
	// the table.
	rows := value[[]struct {
		Index    int      `json:"index"`
		Time     *float64 `json:"time_s"`
		Load     *float64 `json:"load_N"`
		Readings []struct {
			Name, Component string
			Value           *float64
		}
	}](b, `mottlePreview.livePlot.rows`)
	if len(rows) != len(wsStrains) {
		t.Fatalf("the page holds %d live frames, want %d", len(rows), len(wsStrains))
	}
	for i, r := range rows {
		if r.Index != i+1 || r.Time == nil || *r.Time != float64(2*(i+1)) || r.Load == nil || math.Abs(*r.Load-wsE*wsArea*wsStrains[i]) > 1e-9*wsE*wsArea {
			t.Errorf("live frame %d: index %d, time %v, load %v; want index %d at %d s, %g N", i+1, r.Index, r.Time, r.Load, i+1, 2*(i+1), wsE*wsArea*wsStrains[i])
		}
		if len(r.Readings) == 0 || r.Readings[0].Name != "ext1" || r.Readings[0].Value == nil || math.Abs(*r.Readings[0].Value-wsStrains[i]) > 5e-4 {
			t.Errorf("live frame %d: first reading %+v, want ext1 ≈ %g", i+1, r.Readings, wsStrains[i])
		}
	}
	if txt := b.text("#live-text"); !strings.Contains(txt, "Frame 5 at 10 s") || !strings.Contains(txt, "ext1 eng") || !strings.Contains(txt, "±") {
		t.Errorf("live text %q: want the last frame's readings with their predicted std", txt)
	}
	b.run("plot against load", setValue("#live-x", "load"))
	if pts := b.str(`document.getElementById('live-canvas').dataset.points`); pts != "5,5" {
		t.Errorf("against load: %q points per line, want 5,5", pts)
	}
	b.shot("live-plot.png", "#live-panel")

	b.step("a page opened later follows frames another client posts")
	b.run("reload and open the series", chromedp.Reload(), chromedp.WaitVisible(chromedp.ID("s-start")))
	b.wait(`document.body.dataset.ready === "true"`, "the page's script did not start after the reload")
	b.run("open the series", eval(fmt.Sprintf(`mottlePreview.openSeries(%q)`, id)))
	b.wait(`document.getElementById('live-text').dataset.frames === '5'`, "the reopened page did not get the live frames from the event stream")
	var last []byte
	for _, f := range files {
		if f.Name == "step_t10s.png" {
			last, _ = base64.StdEncoding.DecodeString(f.Data)
		}
	}
	resp, err := http.Post(fmt.Sprintf("%s/v1/series/%s/live/frames?time=12&load=%g&name=again.png", base, id, wsE*wsArea*wsStrains[4]), "image/png", bytes.NewReader(last))
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != 200 {
		t.Fatalf("live frame from another client: %s", resp.Status)
	}
	b.wait(`document.getElementById('live-text').dataset.frames === '6' && document.getElementById('live-canvas').dataset.points === '6,6'`,
		"the plot did not take the frame another client posted")
	if txt := b.text("#live-text"); !strings.Contains(txt, "Frame 6 at 12 s") {
		t.Errorf("live text after the other client's frame: %q", txt)
	}
	b.shot("live-follow.png", "#live-panel")
	b.finish()
}

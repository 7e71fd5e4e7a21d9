package service_test

import (
	"bytes"
	"context"
	"encoding/csv"
	"fmt"
	"math"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/synth"
)

// stretchF11 and stretchF22 are the deformation gradient of the last frame
// of the rendered series: a homogeneous stretch along x with a lateral
// contraction (invented demo values).
const stretchF11, stretchF22 = 1.02, 0.994

// loadSeriesPNG renders a 128×128 reference and five frames of a linear
// load ramp of the homogeneous stretch (pkg/synth LoadSeries: frame i is
// the stretch scaled by i/5) as PNG bytes, with the load factor of each.
func loadSeriesPNG(t testing.TB) (ref []byte, frames [][]byte, factors []float64) {
	t.Helper()
	const W, H = 128, 128
	m := synth.Affine{F: [2][2]float64{{stretchF11, 0}, {0, stretchF22}}, CX: 64, CY: 64}
	fr, err := synth.LoadSeries(m, synth.Ramp(5), 1, 1000)
	if err != nil {
		t.Fatal(err)
	}
	pat, err := synth.NewPattern(synth.PatternOptions{Diameter: 4, Seed: 21, Bounds: synth.BoundsForSeries(fr, W, H, 12)})
	if err != nil {
		t.Fatal(err)
	}
	var imgs [][]byte
	err = synth.RenderSeries(context.Background(), pat, fr, synth.RenderOptions{W: W, H: H, Bits: 8, Noise: 1, Seed: 2},
		func(f synth.Frame, g *imageio.Gray, _ synth.Report) error {
			var b bytes.Buffer
			if err := imageio.WritePNG(&b, g, 8); err != nil {
				return err
			}
			imgs = append(imgs, b.Bytes())
			factors = append(factors, f.Factor)
			return nil
		})
	if err != nil {
		t.Fatal(err)
	}
	return imgs[0], imgs[1:], factors[1:]
}

// trackerParams sets a gauge over the middle of the image and an
// extensometer along x.
const trackerParams = `{"subset": 21, "step": 8,
 "gauges": [{"name": "mid", "rect": [32, 32, 96, 96]}],
 "extensometers": [{"name": "x", "a": [24, 64], "b": [104, 64]}]}`

// createSeries posts the reference and returns the series id.
func createSeries(t *testing.T, ts *testServer, ref []byte, params string) string {
	t.Helper()
	ct, body := multipartBody(t, part{"reference", "ref.png", "image/png", ref}, part{"params", "", "application/json", []byte(params)})
	resp, b := ts.do(t, "POST", "/v1/series", ct, body)
	if resp.StatusCode != 201 {
		t.Fatalf("POST /v1/series: %d %s", resp.StatusCode, b)
	}
	return decodeJSON[struct{ ID string }](t, b).ID
}

// postFrame appends frame n (load factor f) and returns its job document
// (waiting for the result unless wait is false).
func postFrame(t *testing.T, ts *testServer, sid string, n int, f float64, img []byte, wait bool) jobDoc {
	t.Helper()
	path := fmt.Sprintf("/v1/series/%s/frames?time=%d&load=%g&wait=%t", sid, n+1, 1000*f, wait)
	resp, b := ts.do(t, "POST", path, "image/png", img)
	if want := map[bool]int{true: 200, false: 202}[wait]; resp.StatusCode != want {
		t.Fatalf("frame %d: %d %s", n, resp.StatusCode, b)
	}
	return decodeJSON[jobDoc](t, b)
}

// checkFrame checks a frame summary against the truth of the homogeneous
// stretch scaled by f. The Green–Lagrange strain of F11 = 1 + a is
// E11 = a + a²/2 (the Green–Lagrange strain E = ½(FᵀF − I); Holzapfel
// 2000, Nonlinear Solid Mechanics); the extensometer's engineering strain
// is a itself.
// Tolerance 1e-4 (0.5 % of the final strain): the series defaults (quintic
// B-splines on images prefiltered with σ = 0.8 px) leave a gain error of
// about 0.2 % on rendered 4 px speckles (measured, see series.Defaults),
// and the random error of a mean over about a hundred points of 21 px
// subsets on 1-grey-level noise is a few 1e-5 (common practice estimate).
// Measured here: at most 6e-5 (mean E11 of the last frame).
func checkFrame(t *testing.T, n int, f float64, j jobDoc) {
	t.Helper()
	const tol = 1e-4
	if j.State != "succeeded" || j.Summary == nil {
		t.Fatalf("frame %d: %s %+v", n, j.State, j.Error)
	}
	s := j.Summary
	a, b := f*(stretchF11-1), f*(stretchF22-1)
	e11, e22 := a+a*a/2, b+b*b/2
	t.Logf("frame %d: E11 %.6f (truth %.6f), E22 %.6f (truth %.6f), gauge E11 %.6f, extensometer %.6f (truth %.6f), valid %.3f",
		n, s.Mean["E11"], e11, s.Mean["E22"], e22, s.Gauges["gauge_mid_E11_mean"], s.Gauges["ext_x_eng"], a, s.ValidFraction)
	if s.Mode != "direct" || s.MeanZNCC == nil || s.Tracked == nil || s.ValidFraction < 0.9 {
		t.Errorf("frame %d: mode %q, zncc %v, tracked %v, valid %g", n, s.Mode, s.MeanZNCC, s.Tracked, s.ValidFraction)
	}
	for _, c := range []struct {
		name      string
		got, want float64
		ok        bool
	}{
		{"mean E11", s.Mean["E11"], e11, true},
		{"mean E22", s.Mean["E22"], e22, true},
		{"gauge mid E11", s.Gauges["gauge_mid_E11_mean"], e11, has(s.Gauges, "gauge_mid_E11_mean")},
		{"gauge mid E22", s.Gauges["gauge_mid_E22_mean"], e22, has(s.Gauges, "gauge_mid_E22_mean")},
		{"extensometer x", s.Gauges["ext_x_eng"], a, has(s.Gauges, "ext_x_eng")},
	} {
		if !c.ok || math.Abs(c.got-c.want) > tol {
			t.Errorf("frame %d: %s = %.6f (present %t), want %.6f ± %g", n, c.name, c.got, c.ok, c.want, tol)
		}
	}
}

func has(m map[string]float64, k string) bool { _, ok := m[k]; return ok }

// TestSeriesTracker posts a rendered load series through the HTTP API with
// the real pipeline: every frame goes through the series engine, so its
// summary carries gauge and extensometer readings and the correlation mode,
// and the strains match the truth. The curve serves the same readings.
func TestSeriesTracker(t *testing.T) {
	ref, frames, factors := loadSeriesPNG(t)
	ts := newServer(t, func(c *service.Config) { c.Analyzer, c.Workers = service.Pipeline{}, 2 })

	sid := createSeries(t, ts, ref, trackerParams)
	// The last two frames are sent without waiting, so that both are queued
	// together: the second must still start from the first's state.
	var last jobDoc
	for n, img := range frames {
		if j := postFrame(t, ts, sid, n, factors[n], img, n < 3); n < 3 {
			checkFrame(t, n, factors[n], j)
		}
	}
	for n := 3; n < len(frames); n++ {
		last = ts.waitDone(t, fmt.Sprintf("/v1/series/%s/frames/%d", sid, n))
		checkFrame(t, n, factors[n], last)
	}
	// Frames 3 and 4 were queued together for two workers: frame 4 must
	// have started only after frame 3 finished.
	type times struct{ Started, Finished time.Time }
	_, b3 := ts.do(t, "GET", "/v1/series/"+sid+"/frames/3", "", nil)
	_, b4 := ts.do(t, "GET", "/v1/series/"+sid+"/frames/4", "", nil)
	if t3, t4 := decodeJSON[times](t, b3), decodeJSON[times](t, b4); t4.Started.Before(t3.Finished) {
		t.Errorf("frame 4 started at %v, before frame 3 finished at %v", t4.Started, t3.Finished)
	}
	resp, b := ts.do(t, "GET", "/v1/series/"+sid+"/curve.csv", "", nil)
	if resp.StatusCode != 200 {
		t.Fatalf("curve.csv: %d %s", resp.StatusCode, b)
	}
	rows, err := csv.NewReader(bytes.NewReader(b)).ReadAll()
	if err != nil || len(rows) != len(frames)+2 { // header, reference, frames
		t.Fatalf("curve.csv (%v):\n%s", err, b)
	}
	col := map[string]int{}
	for i, h := range rows[0] {
		col[h] = i
	}
	for _, h := range []string{"mode", "mean_E11", "gauge_mid_E11_mean", "ext_x_eng"} {
		if _, ok := col[h]; !ok {
			t.Fatalf("curve.csv has no column %s: %v", h, rows[0])
		}
	}
	end := rows[len(rows)-1]
	if got, want := end[col["gauge_mid_E11_mean"]], fmt.Sprint(last.Summary.Gauges["gauge_mid_E11_mean"]); got != want || end[col["mode"]] != "direct" {
		t.Errorf("curve.csv last row %v: gauge %s, want %s", end, got, want)
	}
	// The per-frame routes still serve the frame's field and maps.
	if resp, b := ts.do(t, "GET", "/v1/series/"+sid+"/frames/4/field.json", "", nil); resp.StatusCode != 200 || !strings.Contains(string(b), `"E11"`) {
		t.Errorf("frame field.json: %d", resp.StatusCode)
	}
	if resp, _ := ts.do(t, "GET", "/v1/series/"+sid+"/frames/4/map.png?quantity=E11&on=deformed", "", nil); resp.StatusCode != 200 {
		t.Errorf("frame map: %d", resp.StatusCode)
	}

	// Series-engine parameters are checked like analysis ones.
	for _, c := range []struct{ params, field string }{
		{`{"subset": 21, "gauge": []}`, "params.gauge"},
		{`{"subset": 21, "incremental": "sometimes"}`, "params.incremental"},
		{`{"subset": 21, "switch_zncc": "high"}`, "params.switch_zncc"},
	} {
		ct, body := multipartBody(t, part{"reference", "ref.png", "image/png", ref}, part{"params", "", "application/json", []byte(c.params)})
		resp, b := ts.do(t, "POST", "/v1/series", ct, body)
		if resp.StatusCode/100 != 4 || !strings.Contains(string(b), `"`+c.field+`"`) {
			t.Errorf("params %s: %d %s, want a 4xx naming %s", c.params, resp.StatusCode, b, c.field)
		}
	}
}

// TestSeriesTrackerSIGKILL kills the server while a frame of a series is
// queued or running, starts it again on the same data directory, and
// checks that the series continues from the stored tracker state: the
// interrupted frame and the ones after it match the truth, and the final
// frame equals that of an uninterrupted run of the same series.
func TestSeriesTrackerSIGKILL(t *testing.T) {
	ref, frames, factors := loadSeriesPNG(t)
	t.Setenv("MOTTLE_TEST_ANALYZER", "pipeline")
	dir := t.TempDir()
	p := startProc(t, dir, false, 0)
	sid := createSeries(t, p.ts, ref, trackerParams)
	for n := 0; n < 2; n++ {
		checkFrame(t, n, factors[n], postFrame(t, p.ts, sid, n, factors[n], frames[n], true))
	}
	postFrame(t, p.ts, sid, 2, factors[2], frames[2], false)
	if err := p.cmd.Process.Signal(syscall.SIGKILL); err != nil {
		t.Fatal(err)
	}
	if err := <-p.done; err == nil || !strings.Contains(err.Error(), "killed") {
		t.Fatalf("server exit: %v, want killed", err)
	}
	p.done <- nil // for the cleanup

	p2 := startProc(t, dir, false, 0)
	checkFrame(t, 2, factors[2], p2.ts.waitDone(t, fmt.Sprintf("/v1/series/%s/frames/2", sid)))
	var last jobDoc
	for n := 3; n < len(frames); n++ {
		last = postFrame(t, p2.ts, sid, n, factors[n], frames[n], true)
		checkFrame(t, n, factors[n], last)
	}

	// The same series without a restart, in process.
	ts := newServer(t, func(c *service.Config) { c.Analyzer = service.Pipeline{} })
	sid2 := createSeries(t, ts, ref, trackerParams)
	var want jobDoc
	for n, img := range frames {
		want = postFrame(t, ts, sid2, n, factors[n], img, true)
	}
	for _, k := range []string{"E11", "E22", "u", "v"} {
		if g, w := last.Summary.Mean[k], want.Summary.Mean[k]; math.Abs(g-w) > 1e-12 {
			t.Errorf("final mean %s after a restart %.12g, uninterrupted %.12g", k, g, w)
		}
	}
	if g, w := last.Summary.Gauges["ext_x_eng"], want.Summary.Gauges["ext_x_eng"]; math.Abs(g-w) > 1e-12 {
		t.Errorf("final extensometer after a restart %.12g, uninterrupted %.12g", g, w)
	}
}

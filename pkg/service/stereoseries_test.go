package service_test

import (
	"bytes"
	"encoding/json"
	"fmt"
	"image"
	"math"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/series3d"
	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/synth"
)

// TestStereoSeriesStored: POST /v1/stereo/series stores a stereo series
// and queues its later pairs as frames; more pairs come one at a time to
// /v1/series/{id}/frames as a left and a right part (a repeat under its
// Idempotency-Key takes no second frame); the series, a frame queued just
// before the server stops, and the reference match survive a restart on
// the same data directory, and the next frame continues from the stored
// state (in auto mode, which keeps the last pair's state and reads its
// images back to go on). The plane is stretched along x by 0, 0.3, 0.6 and 0.9 %: the
// extensometer, measured in space, reads each within 2e-4 (the imposed
// homogeneous stretch is the closed-form truth of the rendered scene), and
// the stored curve equals a series3d run in the test process on the same
// images, value for value.
func TestStereoSeriesStored(t *testing.T) {
	const w, h = 320, 240
	dir := t.TempDir()
	ts, stop := serverOn(t, dir)
	rigB := stereoRig(t, w, h)
	rig := part{"rig", "rig.json", "application/json", rigB}
	strains := []float64{0, 0.003, 0.006, 0.009}
	var pairs [][]part
	for k, ea := range strains {
		pl := synth.Placement{Shape: synth.Plane{}, Motion: synth.Affine{F: [2][2]float64{{1 + ea, 0}, {0, 1}}}}
		pairs = append(pairs, stereoPair(t, w, h, pl, int64(10+2*k), "left", "right"))
	}
	const paramsDoc = `{"step": 12, "incremental": "auto", "extensometers": [{"name": "axial", "a": [70, 120], "b": [250, 120]}], "area_mm2": 10, "properties": {"axial": "axial", "modulus_range": [0.001, 0.0095]}}`
	params := part{"params", "", "application/json", []byte(paramsDoc)}
	loads := part{"loads", "loads.csv", "text/csv", []byte("frame,load_N\n0,0\n1,1000\n")}
	ct, body := multipartBody(t, append([]part{rig, params, loads}, append(pairs[0], pairs[1]...)...)...)
	resp, b := ts.do(t, "POST", "/v1/stereo/series?wait=true", ct, body)
	if resp.StatusCode != 200 {
		t.Fatalf("POST /v1/stereo/series?wait=true: %d %s", resp.StatusCode, b)
	}
	res := decodeJSON[service.StereoSeriesResult](t, b)
	loc := resp.Header.Get("Location")
	if loc != "/v1/series/"+res.Series || len(res.Curve.Rows) != 2 || res.Matched < 100 || len(res.Cautions) == 0 {
		t.Fatalf("Location %q, series %s, %d rows, %d of %d matched: want the stored series with 2 rows", loc, res.Series, len(res.Curve.Rows), res.Matched, res.Points)
	}
	v := decodeJSON[struct {
		Kind   string `json:"kind"`
		Frames []string
	}](t, getOK(t, ts, loc))
	if v.Kind != "stereo" || len(v.Frames) != 1 {
		t.Fatalf("series record: kind %q, %d frames; want stereo with 1", v.Kind, len(v.Frames))
	}

	// Frame 2 with an Idempotency-Key, twice: one frame.
	ct, body = multipartBody(t, pairs[2]...)
	resp, first := ts.doKey(t, "POST", loc+"/frames?load=2000&wait=true", ct, "pair-2", body)
	if resp.StatusCode != 200 {
		t.Fatalf("frame 2: %d %s", resp.StatusCode, first)
	}
	resp, again := ts.doKey(t, "POST", loc+"/frames?load=2000&wait=true", ct, "pair-2", body)
	j1, j2 := decodeJSON[jobDoc](t, first), decodeJSON[jobDoc](t, again)
	if resp.StatusCode != 200 || j1.ID != j2.ID || j1.Frame != 1 || len(j1.Field) == 0 {
		t.Fatalf("repeat of frame 2: %d, job %s then %s, index %d, field %d bytes: want one frame, index 1, with its field", resp.StatusCode, j1.ID, j2.ID, j1.Frame, len(j1.Field))
	}
	// Frame 3 queued, and the server stopped at once.
	ct, body = multipartBody(t, pairs[3]...)
	resp, b = ts.do(t, "POST", loc+"/frames?load=3000&wait=false", ct, body)
	if resp.StatusCode != 202 {
		t.Fatalf("frame 3: %d %s", resp.StatusCode, b)
	}
	stop()

	ts, _ = serverOn(t, dir)
	j3 := ts.waitDone(t, loc+"/frames/2")
	if j3.State != "succeeded" {
		t.Fatalf("frame 3 after the restart: %s %+v", j3.State, j3.Error)
	}
	csv := string(getOK(t, ts, loc+"/curve.csv"))
	if n := strings.Count(strings.TrimSpace(csv), "\n"); n != 4 {
		t.Fatalf("curve.csv after the restart has %d rows, want 4:\n%s", n, csv)
	}

	// The same series in the test process.
	rf, err := calib.ParseRig(rigB)
	if err != nil {
		t.Fatal(err)
	}
	dec := func(p part) *imageio.Gray {
		g, err := imageio.Decode(bytes.NewReader(p.data), imageio.Limits{})
		if err != nil {
			t.Fatal(err)
		}
		return g
	}
	var p series3d.Params
	if err := json.Unmarshal([]byte(paramsDoc), &p); err != nil {
		t.Fatal(err)
	}
	ctx := testCtx(t)
	direct, err := series3d.New(ctx, rf.Rig(), dec(pairs[0][0]), dec(pairs[0][1]), series.FrameMeta{Name: "ref"}, p)
	if err != nil {
		t.Fatal(err)
	}
	for k := 1; k < len(pairs); k++ {
		if _, _, err := direct.Add(ctx, dec(pairs[k][0]), dec(pairs[k][1]), series.FrameMeta{Name: fmt.Sprint(k)}); err != nil {
			t.Fatal(err)
		}
	}
	want := direct.Curve().Rows
	cj := decodeJSON[struct {
		Frames []struct {
			Frame  int
			State  string
			Load   *float64
			Gauges map[string]float64
		}
	}](t, getOK(t, ts, loc+"/curve.json"))
	if len(cj.Frames) != len(want)-1 {
		t.Fatalf("curve.json has %d frames, the direct run %d", len(cj.Frames), len(want)-1)
	}
	for k, fr := range cj.Frames {
		got, ok := fr.Gauges["ext_axial_eng"]
		d := want[k+1].Extensometers[0].Eng
		if fr.State != "succeeded" || !ok || got != d || math.Abs(got-strains[k+1]) > 2e-4 {
			t.Errorf("frame %d: %s, axial strain %.6f (given %v); direct run %.6f; imposed %.3f: want equal to the direct run and within 2e-4 of the imposed",
				k, fr.State, got, ok, d, strains[k+1])
		}
	}
	// Young's modulus of the stored curve: the loads make a stress of
	// 100 MPa per 0.3 % strain, so E = 100 MPa / 0.003 = 33,333 MPa (the
	// chord slope of a straight line, ASTM E111).
	pr := decodeJSON[struct {
		Properties series.Properties
		Cautions   []string
	}](t, getOK(t, ts, loc+"/properties.json"))
	if m := pr.Properties.Modulus; m == nil || math.Abs(m.E/(100/0.003)-1) > 0.03 || len(pr.Cautions) == 0 {
		t.Errorf("properties.json: modulus %+v, skipped %v: want 33,333 MPa within 3 %% with cautions", m, pr.Properties.Skipped)
	}
	if !strings.Contains(string(getOK(t, ts, loc+"/report.html")), "<html") {
		t.Error("report.html is not HTML")
	}

	// Bad frames: problem documents naming the part, and no frame taken.
	ct, body = multipartBody(t, pairs[3][0])
	small := stereoPair(t, 240, 180, synth.Placement{Shape: synth.Plane{}}, 0, "left", "right")
	ct2, body2 := multipartBody(t, pairs[3][0], small[1])
	ct3, body3 := multipartBody(t, small...)
	for _, c := range []struct {
		name, ctype string
		body        []byte
		code        int
		slug, field string
	}{
		{"one image", ct, body, 400, "missing-part", "right"},
		{"a raw image", "image/png", pairs[3][0].data, 415, "unsupported-media-type", "Content-Type"},
		{"sizes differ", ct2, body2, 422, "pair-size-mismatch", "right"},
		{"not the series' size", ct3, body3, 422, "unusable-images", "left"},
	} {
		resp, b := ts.do(t, "POST", loc+"/frames", c.ctype, c.body)
		var p service.Problem
		json.Unmarshal(b, &p)
		hit := false
		for _, e := range p.Errors {
			hit = hit || e.Field == c.field
		}
		if resp.StatusCode != c.code || !strings.HasSuffix(p.Type, c.slug) || !hit {
			t.Errorf("%s: %d %s; want %d %s naming %s", c.name, resp.StatusCode, b, c.code, c.slug, c.field)
		}
	}
	if v := decodeJSON[struct{ Frames []string }](t, getOK(t, ts, loc)); len(v.Frames) != 3 {
		t.Errorf("%d frames after the refused ones, want 3", len(v.Frames))
	}
	// The list of series: 2D by default, stereo with kind=stereo.
	if b := getOK(t, ts, "/v1/series"); bytes.Contains(b, []byte(res.Series)) {
		t.Errorf("GET /v1/series lists the stereo series: %s", b)
	}
	if b := getOK(t, ts, "/v1/series?kind=stereo"); !bytes.Contains(b, []byte(res.Series)) {
		t.Errorf("GET /v1/series?kind=stereo does not list the stereo series: %s", b)
	}
	if resp, b := ts.do(t, "GET", "/v1/series?kind=3d", "", nil); resp.StatusCode != 400 || !bytes.Contains(b, []byte(`"kind"`)) {
		t.Errorf("GET /v1/series?kind=3d: %d %s, want 400 naming kind", resp.StatusCode, b)
	}
	resp, b = ts.do(t, "POST", loc+"/live", "application/json", nil)
	if resp.StatusCode != 409 || !bytes.Contains(b, []byte("live-stereo")) {
		t.Errorf("live mode of a stereo series: %d %s, want 409 live-stereo", resp.StatusCode, b)
	}
}

func getOK(t *testing.T, ts *testServer, path string) []byte {
	t.Helper()
	resp, b := ts.do(t, "GET", path, "", nil)
	if resp.StatusCode != 200 {
		t.Fatalf("GET %s: %d %s", path, resp.StatusCode, b)
	}
	return b
}

// TestStereoSeriesQuota: the pairs posted with a new stereo series count
// against the principal's limit of waiting jobs all at once (each is a
// frame job): four pairs (three frames) with a limit of two are refused
// with 429 principal-queue-full before anything is stored.
func TestStereoSeriesQuota(t *testing.T) {
	const w, h = 320, 240
	l := newLab(t, func(c *service.Config) { c.MaxQueuedPerPrincipal = 2 })
	blank := encodePNG(t, image.NewGray(image.Rect(0, 0, w, h)))
	parts := []part{{"rig", "rig.json", "application/json", stereoRig(t, w, h)}}
	for k := range 4 {
		parts = append(parts, part{"left", fmt.Sprintf("L%d.png", k), "image/png", blank}, part{"right", fmt.Sprintf("R%d.png", k), "image/png", blank})
	}
	ct, body := multipartBody(t, parts...)
	st, b := l.call(t, "rig", "POST", "/v1/stereo/series", nil, ct, body)
	if st != 429 || decodeJSON[problemDoc](t, b).Type != "urn:mottle:problem:principal-queue-full" || !bytes.Contains(b, []byte("would add 3")) {
		t.Fatalf("four pairs with a limit of two waiting jobs: %d %s, want 429 principal-queue-full saying the request would add 3", st, b)
	}
	if st, b := l.call(t, "rig", "GET", "/v1/series?kind=stereo", nil, "", nil); st != 200 || bytes.Contains(b, []byte(`"id"`)) {
		t.Errorf("stereo series after the refusal: %d %s, want none", st, b)
	}
}

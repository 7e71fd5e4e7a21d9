package service_test

import (
	"bufio"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"math"
	"strconv"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/service"
)

// liveDoc is the answer to a live frame.
type liveDoc struct {
	Index    int `json:"index"`
	Trusted  bool
	Full     bool     `json:"full_field_due"`
	Job      string   `json:"full_field_job"`
	DecodeMS *float64 `json:"decode_ms"`
	Readings []struct {
		Name, Component string
		Value           *float64
		Std             *float64
		Trusted         bool
		Reason          string
	}
}

// TestLiveRoute sends the rendered load ramp of loadSeriesPNG through the
// live route of a series (full field of every frame), follows the live
// event stream, and checks: each answer has the frame's index, trusted
// readings whose extensometer strain is the applied one (engineering
// strain a of F11 = 1 + a, within 5e-4, the two-point tolerance of the
// series tests) and a predicted std; the stream delivers the same values
// in frame order; curve.csv, once the frame jobs are done, has one row per
// frame with the full-field extensometer strain, within the live value's
// predicted std of the live one.
func TestLiveRoute(t *testing.T) {
	ts := newServer(t, func(c *service.Config) { c.Analyzer = service.Pipeline{} })
	ref, frames, factors := loadSeriesPNG(t)
	sid := createSeries(t, ts, ref, trackerParams)

	resp, b := ts.do(t, "POST", "/v1/series/"+sid+"/live", "application/json", []byte(`{"full": "every", "max_jump": 0.5}`))
	if resp.StatusCode != 201 {
		t.Fatalf("POST live: %d %s", resp.StatusCode, b)
	}
	if resp, _ := ts.do(t, "POST", "/v1/series/"+sid+"/live", "application/json", nil); resp.StatusCode != 409 {
		t.Errorf("second POST live: %d, want 409", resp.StatusCode)
	}
	evResp, err := ts.client().Get(ts.URL + "/v1/series/" + sid + "/live/events")
	if err != nil {
		t.Fatal(err)
	}
	defer evResp.Body.Close()
	events := make(chan liveDoc, 100)
	go func() {
		defer close(events)
		sc := bufio.NewScanner(evResp.Body)
		sc.Buffer(make([]byte, 1<<16), 1<<20)
		for sc.Scan() {
			if d, ok := strings.CutPrefix(sc.Text(), "data: "); ok {
				var v liveDoc
				if json.Unmarshal([]byte(d), &v) == nil {
					events <- v
				}
			}
		}
	}()

	var answers []liveDoc
	for n, img := range frames {
		path := fmt.Sprintf("/v1/series/%s/live/frames?time=%d&load=%g", sid, n+1, 1000*factors[n])
		resp, b := ts.do(t, "POST", path, "image/png", img)
		if resp.StatusCode != 200 {
			t.Fatalf("live frame %d: %d %s", n+1, resp.StatusCode, b)
		}
		v := decodeJSON[liveDoc](t, b)
		a := factors[n] * (stretchF11 - 1)
		if v.Index != n+1 || !v.Trusted || !v.Full || v.Job == "" || v.DecodeMS == nil || len(v.Readings) != 4 {
			t.Fatalf("live frame %d: %s", n+1, b)
		}
		if r := v.Readings[0]; r.Name != "x" || r.Value == nil || r.Std == nil || math.Abs(*r.Value-a) > 5e-4 {
			t.Errorf("live frame %d: extensometer %+v, want %.5f", n+1, r, a)
		}
		answers = append(answers, v)
	}
	for n := range answers {
		var v liveDoc
		select {
		case ev, ok := <-events:
			if !ok {
				t.Fatalf("the live event stream ended after %d of %d events", n, len(answers))
			}
			v = ev
		case <-testCtx(t).Done():
			t.Fatalf("the live event stream sent %d of %d events", n, len(answers))
		}
		if len(v.Readings) == 0 || v.Readings[0].Value == nil {
			t.Fatalf("event %d has no reading: %+v", n, v)
		}
		if v.Index != n+1 || *v.Readings[0].Value != *answers[n].Readings[0].Value {
			t.Errorf("event %d: index %d value %v, want frame %d's %v", n, v.Index, v.Readings[0].Value, n+1, *answers[n].Readings[0].Value)
		}
	}
	for n := range frames {
		ts.waitDone(t, fmt.Sprintf("/v1/series/%s/frames/%d", sid, n))
	}
	resp, b = ts.do(t, "GET", "/v1/series/"+sid+"/curve.csv", "", nil)
	if resp.StatusCode != 200 {
		t.Fatalf("curve.csv: %d %s", resp.StatusCode, b)
	}
	rows, err := csv.NewReader(strings.NewReader(string(b))).ReadAll()
	if err != nil || len(rows) != len(frames)+2 {
		t.Fatalf("curve.csv: %v, %d rows, want header + %d", err, len(rows), len(frames)+1)
	}
	col := map[string]int{}
	for i, h := range rows[0] {
		col[h] = i
	}
	for n, v := range answers {
		row := rows[n+2]
		if row[col["mode"]] != "direct" || row[col["index"]] != strconv.Itoa(n+1) {
			t.Errorf("curve row %d: index %s mode %s, want %d direct (the full field)", n+1, row[col["index"]], row[col["mode"]], n+1)
		}
		full, err := strconv.ParseFloat(row[col["ext_x_eng"]], 64)
		live := v.Readings[0]
		if err != nil || math.Abs(full-*live.Value) > *live.Std {
			t.Errorf("frame %d: full-field extensometer %s, live %.7f ± %.1e", n+1, row[col["ext_x_eng"]], *live.Value, *live.Std)
		}
	}

	// Bad input: not an image, and a live route of no series.
	if resp, _ := ts.do(t, "POST", "/v1/series/"+sid+"/live/frames", "image/png", []byte("nope")); resp.StatusCode < 400 || resp.StatusCode >= 500 {
		t.Errorf("garbage frame: %d, want 4xx", resp.StatusCode)
	}
	if resp, _ := ts.do(t, "POST", "/v1/series/"+sid+"/live/frames/1/full", "", nil); resp.StatusCode != 409 {
		t.Errorf("full field of a frame that has one: %d, want 409", resp.StatusCode)
	}
	if resp, _ := ts.do(t, "POST", "/v1/series/"+sid+"/live", "application/json", []byte(`{"full": "often"}`)); resp.StatusCode != 409 && resp.StatusCode != 400 {
		t.Errorf("bad options: %d", resp.StatusCode)
	}
	// Full field on request: frame 1 stays live in the curve, frame 2 gets
	// its full field when asked.
	req := createSeries(t, ts, ref, trackerParams)
	if resp, b := ts.do(t, "POST", "/v1/series/"+req+"/live", "application/json", []byte(`{"full": "on_request"}`)); resp.StatusCode != 201 {
		t.Fatalf("POST live on request: %d %s", resp.StatusCode, b)
	}
	for n := range 2 {
		resp, b := ts.do(t, "POST", fmt.Sprintf("/v1/series/%s/live/frames?time=%d", req, n+1), "image/png", frames[n])
		if v := decodeJSON[liveDoc](t, b); resp.StatusCode != 200 || v.Full || v.Job != "" {
			t.Fatalf("on request, frame %d: %d %s", n+1, resp.StatusCode, b)
		}
	}
	if resp, b := ts.do(t, "POST", "/v1/series/"+req+"/live/frames/2/full", "", nil); resp.StatusCode != 202 {
		t.Fatalf("request full field of frame 2: %d %s", resp.StatusCode, b)
	}
	if resp, _ := ts.do(t, "POST", "/v1/series/"+req+"/live/frames/1/full", "", nil); resp.StatusCode != 409 {
		t.Errorf("full field of frame 1 after frame 2's: %d, want 409 (frame order)", resp.StatusCode)
	}
	ts.waitDone(t, fmt.Sprintf("/v1/series/%s/frames/0", req))
	_, b = ts.do(t, "GET", "/v1/series/"+req+"/curve.csv", "", nil)
	rows, _ = csv.NewReader(strings.NewReader(string(b))).ReadAll()
	if len(rows) != 4 || rows[2][col["mode"]] != "live" || rows[3][col["mode"]] != "direct" || rows[3][col["index"]] != "2" || rows[2][col["ext_x_eng"]] == "" {
		t.Errorf("on-request curve.csv, want rows 1 live and 2 direct:\n%s", b)
	}

	other := createSeries(t, ts, ref, trackerParams)
	if resp, _ := ts.do(t, "POST", "/v1/series/"+other+"/live", "application/json", []byte(`{"full": "often"}`)); resp.StatusCode != 400 {
		t.Errorf("bad live options: %d, want 400", resp.StatusCode)
	}
	if resp, _ := ts.do(t, "GET", "/v1/series/"+other+"/live/events", "", nil); resp.StatusCode != 404 {
		t.Errorf("events of a series not live: %d, want 404", resp.StatusCode)
	}
}

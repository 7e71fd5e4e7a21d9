package service_test

import (
	"bufio"
	"encoding/csv"
	"fmt"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

func TestSeries(t *testing.T) {
	ts := newServer(t, nil)
	ref := encodePNG(t, speckle(40, 40, 0, 0, 11))
	ct, body := multipartBody(t, part{"reference", "ref.png", "image/png", ref}, part{"params", "", "application/json", []byte(`{"subset": 15}`)})
	resp, b := ts.do(t, "POST", "/v1/series", ct, body)
	if resp.StatusCode != http.StatusCreated {
		t.Fatalf("POST /v1/series: %d %s", resp.StatusCode, b)
	}
	sid := decodeJSON[struct{ ID string }](t, b).ID
	if resp.Header.Get("Location") != "/v1/series/"+sid {
		t.Errorf("Location %q", resp.Header.Get("Location"))
	}

	// Follow the series events while frames arrive.
	evResp, err := ts.client().Get(ts.URL + "/v1/series/" + sid + "/events")
	if err != nil {
		t.Fatal(err)
	}
	defer evResp.Body.Close()
	frames := make(chan string, 100)
	go func() {
		sc := bufio.NewScanner(evResp.Body)
		for sc.Scan() {
			if ev, ok := strings.CutPrefix(sc.Text(), "event: "); ok {
				frames <- ev
			}
		}
		close(frames)
	}()

	for n := 0; n < 4; n++ {
		frame := encodePNG(t, speckle(40, 40, float64(n), 0, 11))
		path := fmt.Sprintf("/v1/series/%s/frames?time=%g&load=%d", sid, 0.5*float64(n), 100*n)
		resp, b := ts.do(t, "POST", path, "image/png", frame)
		if resp.StatusCode != 200 {
			t.Fatalf("frame %d: %d %s", n, resp.StatusCode, b)
		}
		j := decodeJSON[jobDoc](t, b)
		if j.Frame != n || j.State != "succeeded" || j.Summary == nil || j.Summary.Mean["u"] != float64(n) {
			t.Errorf("frame %d: %+v", n, j)
		}
		if resp.Header.Get("Location") != fmt.Sprintf("/v1/series/%s/frames/%d", sid, n) {
			t.Errorf("frame Location %q", resp.Header.Get("Location"))
		}
	}
	// One frame without waiting.
	resp, b = ts.do(t, "POST", "/v1/series/"+sid+"/frames?wait=false", "application/octet-stream", encodePNG(t, speckle(40, 40, 0, 2, 11)))
	if resp.StatusCode != 202 {
		t.Fatalf("frame wait=false: %d %s", resp.StatusCode, b)
	}
	if j := ts.waitDone(t, "/v1/series/"+sid+"/frames/4"); j.Summary.Mean["v"] != 2 {
		t.Errorf("frame 4: %+v", j.Summary)
	}
	resp, b = ts.do(t, "GET", "/v1/series/"+sid+"/frames/2/field.csv", "", nil)
	if resp.StatusCode != 200 || !strings.Contains(string(b), "0,0,2,0") {
		t.Errorf("frame field.csv: %d %s", resp.StatusCode, b)
	}
	resp, _ = ts.do(t, "GET", "/v1/series/"+sid+"/frames/1/map.png?quantity=u", "", nil)
	if resp.StatusCode != 200 || resp.Header.Get("Content-Type") != "image/png" {
		t.Errorf("frame map: %d", resp.StatusCode)
	}
	resp, _ = ts.do(t, "GET", "/v1/series/"+sid+"/frames/1/images/reference.png", "", nil)
	if resp.StatusCode != 200 {
		t.Errorf("frame reference image: %d", resp.StatusCode)
	}
	for _, bad := range []string{"/frames/9", "/frames/-1", "/frames/x"} {
		if resp, _ := ts.do(t, "GET", "/v1/series/"+sid+bad, "", nil); resp.StatusCode != 404 {
			t.Errorf("GET %s: %d, want 404", bad, resp.StatusCode)
		}
	}

	resp, b = ts.do(t, "GET", "/v1/series/"+sid+"/curve.csv", "", nil)
	if resp.StatusCode != 200 {
		t.Fatalf("curve.csv: %d %s", resp.StatusCode, b)
	}
	rows, err := csv.NewReader(strings.NewReader(string(b))).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	// The one curve format of pkg/series: the reference row, then one row
	// per frame (named frame_<index> when no name was given).
	col := map[string]int{}
	for i, h := range rows[0] {
		col[h] = i
	}
	if strings.Join(rows[0][:6], ",") != "index,name,mode,static,time_s,load_N" || len(rows) != 7 {
		t.Fatalf("curve.csv:\n%s", b)
	}
	if r := rows[3]; r[col["index"]] != "2" || r[col["name"]] != "frame_1" || r[col["time_s"]] != "0.5" || r[col["load_N"]] != "100" || r[col["mean_u"]] != "1" {
		t.Errorf("curve row 2: %v", rows[3])
	}
	resp, b = ts.do(t, "GET", "/v1/series/"+sid+"/curve.json", "", nil)
	if resp.StatusCode != 200 || !strings.Contains(string(b), `"load": 300`) {
		t.Errorf("curve.json: %d %s", resp.StatusCode, b)
	}
	resp, b = ts.do(t, "GET", "/v1/series/"+sid, "", nil)
	if resp.StatusCode != 200 || !strings.Contains(string(b), `"frame_count": 5`) || !strings.Contains(string(b), `"succeeded": 5`) {
		t.Errorf("series: %d %s", resp.StatusCode, b)
	}

	// Bad frames.
	for _, c := range []struct {
		ctype string
		body  []byte
		query string
		want  int
	}{
		{"text/plain", encodePNG(t, speckle(40, 40, 0, 0, 11)), "", 415},
		{"", encodePNG(t, speckle(40, 40, 0, 0, 11)), "", 415},
		{"image/png", encodePNG(t, speckle(32, 40, 0, 0, 11)), "", 422},
		{"image/png", []byte("\x89PNG\r\n\x1a\n short"), "", 400},
		{"image/png", encodePNG(t, speckle(40, 40, 0, 0, 11)), "?time=soon", 400},
		{"image/png", encodePNG(t, speckle(40, 40, 0, 0, 11)), "?load=Inf", 400},
	} {
		resp, b := ts.do(t, "POST", "/v1/series/"+sid+"/frames"+c.query, c.ctype, c.body)
		if resp.StatusCode != c.want {
			t.Errorf("bad frame %q %s: %d, want %d: %s", c.ctype, c.query, resp.StatusCode, c.want, b)
		}
	}
	resp, b = ts.do(t, "GET", "/v1/series/"+sid, "", nil)
	if !strings.Contains(string(b), `"frame_count": 5`) {
		t.Errorf("bad frames changed the series: %s", b)
	}

	n := 0
	timeout := testCtx(t).Done()
	for n < 5 {
		select {
		case ev, ok := <-frames:
			if !ok {
				t.Fatalf("event stream ended after %d frame events", n)
			}
			if ev == "frame" {
				n++
			}
		case <-timeout:
			t.Fatalf("only %d frame events", n)
		}
	}

	resp, _ = ts.do(t, "DELETE", "/v1/series/"+sid, "", nil)
	if resp.StatusCode != 204 {
		t.Errorf("DELETE series: %d", resp.StatusCode)
	}
	if resp, _ := ts.do(t, "GET", "/v1/series/"+sid+"/frames/0", "", nil); resp.StatusCode != 404 {
		t.Errorf("frame after delete: %d", resp.StatusCode)
	}
}

// TestRetention removes finished analyses after the retention period and
// keeps unfinished ones: the second job is held running until the first
// has been removed.
func TestRetention(t *testing.T) {
	h := newHolder()
	ts := newServer(t, func(c *service.Config) {
		c.Retention = 300 * time.Millisecond
		c.Workers = 1
		c.BeforeCompute = h.hook
	})
	t.Cleanup(h.release) // before the server's stop: no wait for the shutdown grace
	ref, def := pair(t, 32, 32, 1, 0, 12)
	ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 15}`)...)
	h.free.Store(1) // the first job runs through, the second is held
	_, b := ts.do(t, "POST", "/v1/analyses?wait=true", ct, body)
	done := decodeJSON[jobDoc](t, b).ID
	h.next(t)
	_, b = ts.do(t, "POST", "/v1/analyses", ct, body)
	running := decodeJSON[jobDoc](t, b).ID
	h.next(t)
	poll(t, "retention to remove the finished analysis", func() bool {
		resp, _ := ts.do(t, "GET", "/v1/analyses/"+done, "", nil)
		return resp.StatusCode == 404
	})
	if resp, b := ts.do(t, "GET", "/v1/analyses/"+running, "", nil); resp.StatusCode != 200 || decodeJSON[jobDoc](t, b).State != "running" {
		t.Errorf("running analysis removed or finished: %d %s", resp.StatusCode, b)
	}
	// The audit trail holds the removal, by the principal "retention"
	// (recorded just after the record is gone).
	var deleted []string
	poll(t, "the removal in the audit trail", func() bool {
		_, b = ts.do(t, "GET", "/v1/audit?limit=1000", "", nil)
		deleted = nil
		for _, e := range decodeJSON[struct{ Entries []jobs.AuditEntry }](t, b).Entries {
			if e.Action == jobs.AuditDelete {
				deleted = append(deleted, e.Principal+" "+e.Resource+" "+e.ID+" "+e.Project)
				if !strings.HasPrefix(e.Detail, "by the retention setting") {
					t.Errorf("retention entry detail %q", e.Detail)
				}
			}
		}
		return len(deleted) > 0
	})
	if want := "retention analysis " + done + " default"; len(deleted) != 1 || deleted[0] != want {
		t.Errorf("deletions in the audit trail: %q, want only %q", deleted, want)
	}
}

func TestMetricsAndHealth(t *testing.T) {
	ts := newServer(t, nil)
	ref, def := pair(t, 32, 32, 1, 0, 13)
	ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 15}`)...)
	ts.do(t, "POST", "/v1/analyses?wait=true", ct, body)
	// The runner counts a job's points just after it records the job as
	// finished, which ends the wait: the count may follow the answer.
	var resp *http.Response
	var b []byte
	poll(t, "the finished job's points in the metrics", func() bool {
		resp, b = ts.do(t, "GET", "/metrics", "", nil)
		return strings.Contains(string(b), "mottle_points_total 1")
	})
	if resp.StatusCode != 200 || !strings.HasPrefix(resp.Header.Get("Content-Type"), "text/plain; version=0.0.4") {
		t.Fatalf("metrics: %d %q", resp.StatusCode, resp.Header.Get("Content-Type"))
	}
	for _, want := range []string{
		"mottle_queue_depth 0",
		`mottle_jobs{state="succeeded"} 1`,
		"mottle_points_total 1",
		"# TYPE mottle_http_request_duration_seconds histogram",
		`mottle_http_request_duration_seconds_count{method="POST",route="/v1/analyses"} 1`,
		`mottle_http_request_duration_seconds_bucket{method="POST",route="/v1/analyses",le="+Inf"} 1`,
	} {
		if !strings.Contains(string(b), want) {
			t.Errorf("metrics lack %q", want)
		}
	}
	if resp, b := ts.do(t, "GET", "/readyz", "", nil); resp.StatusCode != 200 || !strings.Contains(string(b), "ready") {
		t.Errorf("readyz: %d %s", resp.StatusCode, b)
	}
	ts.stop() // begin shutdown: no longer ready
	if resp, _ := ts.do(t, "GET", "/readyz", "", nil); resp.StatusCode != 503 {
		t.Errorf("readyz while stopping: %d, want 503", resp.StatusCode)
	}
	if resp, _ := ts.do(t, "POST", "/v1/analyses", ct, body); resp.StatusCode != 503 {
		t.Errorf("submission while stopping: %d, want 503", resp.StatusCode)
	}
}

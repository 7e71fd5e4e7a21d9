package service_test

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"image/png"
	"net/http"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service"
)

func TestAnalysisLifecycle(t *testing.T) {
	ts := newServer(t, nil)
	ref, def := pair(t, 64, 48, 2, -1, 1)
	ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 15, "step": 8}`)...)
	resp, b := ts.do(t, "POST", "/v1/analyses", ct, body)
	if resp.StatusCode != http.StatusAccepted {
		t.Fatalf("POST: %d %s", resp.StatusCode, b)
	}
	j := decodeJSON[jobDoc](t, b)
	if loc := resp.Header.Get("Location"); loc != "/v1/analyses/"+j.ID {
		t.Errorf("Location %q, id %q", loc, j.ID)
	}
	if resp.Header.Get("X-Request-Id") == "" {
		t.Error("no X-Request-Id")
	}
	done := ts.waitDone(t, "/v1/analyses/"+j.ID)
	if done.State != "succeeded" {
		t.Fatalf("state %s: %+v", done.State, done.Error)
	}
	if done.Summary == nil || done.Summary.Mean["u"] != 2 || done.Summary.Mean["v"] != -1 {
		t.Errorf("summary %+v, want mean u=2 v=-1", done.Summary)
	}
	for _, f := range []struct{ path, ctype, prefix string }{
		{"/field.json", "application/json", `{"subset":15,"u":2,"v":-1}`},
		{"/field.csv", "text/csv; charset=utf-8", "x,y,u,v\n0,0,2,-1"},
		{"/field.vts", "application/xml", "<VTKFile"},
		{"/field.npz", "application/zip", "PK"},
		{"/arrays/E11.npy", "application/octet-stream", "\x93NUMPY"},
	} {
		resp, b := ts.do(t, "GET", "/v1/analyses/"+j.ID+f.path, "", nil)
		if resp.StatusCode != 200 || resp.Header.Get("Content-Type") != f.ctype || !strings.HasPrefix(string(b), f.prefix) {
			t.Errorf("GET %s: %d %q %q", f.path, resp.StatusCode, resp.Header.Get("Content-Type"), b)
		}
	}
	resp, b = ts.do(t, "GET", "/v1/analyses/"+j.ID+"/arrays/nope.npy", "", nil)
	if resp.StatusCode != 404 || !strings.Contains(string(b), "E11") {
		t.Errorf("unknown array: %d %s", resp.StatusCode, b)
	}
	resp, b = ts.do(t, "GET", "/v1/analyses/"+j.ID+"/map.png?quantity=E11&range=-0.01,0.01&on=deformed", "", nil)
	if resp.StatusCode != 200 || resp.Header.Get("Content-Type") != "image/png" {
		t.Fatalf("map: %d %s", resp.StatusCode, b)
	}
	if m, err := png.Decode(bytes.NewReader(b)); err != nil || m.Bounds().Dx() != 64 {
		t.Errorf("map PNG: %v", err)
	}
	for _, q := range []string{"quantity=zzz", "quantity=E11&range=1,0", "quantity=E11&on=side", "range=0,1", "quantity=E11&range=NaN,1"} {
		resp, b = ts.do(t, "GET", "/v1/analyses/"+j.ID+"/map.png?"+q, "", nil)
		p := decodeJSON[problemDoc](t, b)
		if resp.StatusCode != 400 || len(p.Errors) == 0 {
			t.Errorf("map?%s: %d %s, want 400 with a field", q, resp.StatusCode, b)
		}
	}
	resp, b = ts.do(t, "GET", "/v1/analyses/"+j.ID+"/images/deformed.png", "", nil)
	if resp.StatusCode != 200 || !bytes.Equal(b, def) {
		// Both are 8-bit grey PNGs of the same pixels; the encoder is the same.
		if m, err := png.Decode(bytes.NewReader(b)); err != nil || m.Bounds().Dx() != 64 {
			t.Errorf("deformed.png: %d %v", resp.StatusCode, err)
		}
	}
	resp, b = ts.do(t, "GET", "/v1/analyses", "", nil)
	if resp.StatusCode != 200 || !strings.Contains(string(b), j.ID) {
		t.Errorf("list: %d %s", resp.StatusCode, b)
	}
	resp, _ = ts.do(t, "DELETE", "/v1/analyses/"+j.ID, "", nil)
	if resp.StatusCode != http.StatusNoContent {
		t.Errorf("DELETE: %d", resp.StatusCode)
	}
	resp, _ = ts.do(t, "GET", "/v1/analyses/"+j.ID, "", nil)
	if resp.StatusCode != 404 {
		t.Errorf("GET after DELETE: %d", resp.StatusCode)
	}
}

func TestWaitReturnsField(t *testing.T) {
	ts := newServer(t, nil)
	ref, def := pair(t, 48, 48, -3, 2, 2)
	ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 15}`)...)
	resp, b := ts.do(t, "POST", "/v1/analyses?wait=true", ct, body)
	if resp.StatusCode != 200 {
		t.Fatalf("POST ?wait=true: %d %s", resp.StatusCode, b)
	}
	j := decodeJSON[jobDoc](t, b)
	var field bytes.Buffer
	json.Compact(&field, j.Field)
	if j.State != "succeeded" || field.String() != `{"subset":15,"u":-3,"v":2}` {
		t.Errorf("state %s field %s", j.State, j.Field)
	}
}

func TestResultsNotReadyAndCancel(t *testing.T) {
	h := newHolder() // the first job stays running until it is canceled
	ts := newServer(t, func(c *service.Config) { c.Workers = 1; c.BeforeCompute = h.hook })
	ref, def := pair(t, 32, 32, 1, 1, 3)
	ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 15}`)...)
	var ids []string
	for i := 0; i < 2; i++ {
		resp, b := ts.do(t, "POST", "/v1/analyses", ct, body)
		if resp.StatusCode != 202 {
			t.Fatalf("POST: %d %s", resp.StatusCode, b)
		}
		ids = append(ids, decodeJSON[jobDoc](t, b).ID)
	}
	if id := h.next(t); id != ids[0] {
		t.Fatalf("held job %s, want the first, %s", id, ids[0])
	}
	ts.waitState(t, "/v1/analyses/"+ids[0], "running")
	resp, b := ts.do(t, "GET", "/v1/analyses/"+ids[0]+"/field.json", "", nil)
	if resp.StatusCode != http.StatusConflict || !strings.Contains(string(b), `"state": "running"`) {
		t.Errorf("field.json of a running job: %d %s", resp.StatusCode, b)
	}
	// The second waits behind the first on the single worker.
	resp, b = ts.do(t, "GET", "/v1/analyses/"+ids[1]+"/field.json", "", nil)
	if resp.StatusCode != http.StatusConflict || !strings.Contains(string(b), `"state": "queued"`) {
		t.Errorf("field.json of a queued job: %d %s", resp.StatusCode, b)
	}
	for _, id := range ids {
		if resp, b := ts.do(t, "POST", "/v1/analyses/"+id+"/cancel", "", nil); resp.StatusCode != 202 {
			t.Errorf("cancel: %d %s", resp.StatusCode, b)
		}
	}
	for _, id := range ids {
		if j := ts.waitDone(t, "/v1/analyses/"+id); j.State != "canceled" {
			t.Errorf("job %s: %s, want canceled", id, j.State)
		}
	}
}

// TestEvents reads the server-sent events of an analysis to the end. The
// job is held after its first progress report until the stream has shown
// that progress.
func TestEvents(t *testing.T) {
	ts := newServer(t, nil)
	seen := make(chan struct{})
	ts.fake.midway = func(ctx context.Context) {
		select {
		case <-seen:
		case <-ctx.Done():
		}
	}
	ref, def := pair(t, 32, 32, 0, 1, 4)
	ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 15}`)...)
	_, b := ts.do(t, "POST", "/v1/analyses", ct, body)
	id := decodeJSON[jobDoc](t, b).ID
	resp, err := ts.client().Get(ts.URL + "/v1/analyses/" + id + "/events")
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	if resp.Header.Get("Content-Type") != "text/event-stream" {
		t.Fatalf("content type %q", resp.Header.Get("Content-Type"))
	}
	sc := bufio.NewScanner(resp.Body)
	var events []string
	sawProgress := false
	for sc.Scan() {
		line := sc.Text()
		if ev, ok := strings.CutPrefix(line, "event: "); ok {
			events = append(events, ev)
		}
		if !sawProgress && strings.HasPrefix(line, "data: ") && strings.Contains(line, `"state":"running"`) && strings.Contains(line, `"done":1,`) {
			sawProgress = true
			close(seen)
		}
	}
	if len(events) < 2 || events[len(events)-1] != "done" {
		t.Errorf("events %v, want status… then done", events)
	}
	if !sawProgress {
		t.Error("no progress event of a running job")
	}
}

// TestConcurrentClients has 32 clients each submit small pairs to a real
// server on 127.0.0.1, retrying on 429; every accepted job must complete
// with the displacement it was rendered with.
func TestConcurrentClients(t *testing.T) {
	ts := newServer(t, nil)
	ctx := testCtx(t)
	const clients, each = 32, 2
	var wg sync.WaitGroup
	errs := make(chan error, clients*each)
	for c := 0; c < clients; c++ {
		wg.Add(1)
		go func(c int) {
			defer wg.Done()
			for k := 0; k < each; k++ {
				dx, dy := c%7-3, (c/7+k)%5-2
				ref, def := pair(t, 40, 40, dx, dy, uint64(100+c))
				ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 15, "step": 8}`)...)
				var id string
				for id == "" {
					req, _ := http.NewRequest("POST", ts.URL+"/v1/analyses", bytes.NewReader(body))
					req.Header.Set("Content-Type", ct)
					resp, err := ts.client().Do(req)
					if err != nil {
						errs <- err
						return
					}
					b := new(bytes.Buffer)
					b.ReadFrom(resp.Body)
					resp.Body.Close()
					switch resp.StatusCode {
					case 202:
						id = decodeJSON[jobDoc](t, b.Bytes()).ID
					case 429:
						// Back off; the queue drains as jobs finish.
						select {
						case <-ctx.Done():
							errs <- fmt.Errorf("client %d: still answered 429 when the wait ended (waitBound)", c)
							return
						case <-time.After(50 * time.Millisecond):
						}
					default:
						errs <- fmt.Errorf("client %d: %d %s", c, resp.StatusCode, b)
						return
					}
				}
				j := ts.waitDone(t, "/v1/analyses/"+id)
				if j.State != "succeeded" || j.Summary.Mean["u"] != float64(dx) || j.Summary.Mean["v"] != float64(dy) {
					errs <- fmt.Errorf("client %d: %s %+v, want u=%d v=%d", c, j.State, j.Summary, dx, dy)
				}
			}
		}(c)
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		t.Error(err)
	}
}

// TestQueueFull fills a tiny queue behind a worker held on its first job:
// the overflow is answered 429 with Retry-After, and every job answered
// 202 completes once the worker is released.
func TestQueueFull(t *testing.T) {
	h := newHolder()
	ts := newServer(t, func(c *service.Config) {
		c.Workers = 1
		be := c.Backend
		be.Queue = embeddedQueue(3)
		c.Backend = be
		c.BeforeCompute = h.hook
	})
	ref, def := pair(t, 32, 32, 1, 0, 5)
	ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 15}`)...)
	var accepted []string
	rejected := 0
	for i := 0; i < 10; i++ {
		resp, b := ts.do(t, "POST", "/v1/analyses", ct, body)
		switch resp.StatusCode {
		case 202:
			accepted = append(accepted, decodeJSON[jobDoc](t, b).ID)
		case 429:
			rejected++
			if resp.Header.Get("Retry-After") == "" {
				t.Error("429 without Retry-After")
			}
			if p := decodeJSON[problemDoc](t, b); p.Status != 429 || p.Type == "" {
				t.Errorf("429 problem %+v", p)
			}
		default:
			t.Fatalf("POST: %d %s", resp.StatusCode, b)
		}
	}
	// The queue holds 3; the worker may have taken the first job out of it
	// before the others came.
	if len(accepted) < 3 || len(accepted) > 4 || rejected != 10-len(accepted) {
		t.Fatalf("accepted %d, rejected %d: want 3 or 4 accepted, the rest rejected", len(accepted), rejected)
	}
	h.release()
	for _, id := range accepted {
		if j := ts.waitDone(t, "/v1/analyses/"+id); j.State != "succeeded" {
			t.Errorf("accepted job %s ended %s", id, j.State)
		}
	}
	// Nothing rejected left a record behind.
	_, b := ts.do(t, "GET", "/v1/analyses", "", nil)
	if n := strings.Count(string(b), `"kind": "analysis"`); n != len(accepted) {
		t.Errorf("%d analyses listed, %d accepted", n, len(accepted))
	}
}

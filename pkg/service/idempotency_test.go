package service_test

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"net/http"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service"
)

// The retry tests follow the IETF httpapi working group's draft "The
// Idempotency-Key HTTP Header Field" (Jena & Dalal): a repeat with the same
// key and request is answered with the first one's result, a key reused
// with another request is refused with 422.

// doKey sends a request with an Idempotency-Key (none if key is "") and
// returns the response with its body read.
func (ts *testServer) doKey(t testing.TB, method, path, ctype, key string, body []byte) (*http.Response, []byte) {
	t.Helper()
	req, err := http.NewRequest(method, ts.URL+path, bytes.NewReader(body))
	if err != nil {
		t.Fatal(err)
	}
	if ctype != "" {
		req.Header.Set("Content-Type", ctype)
	}
	if key != "" {
		req.Header.Set("Idempotency-Key", key)
	}
	if ts.token != "" {
		req.Header.Set("Authorization", "Bearer "+ts.token)
	}
	resp, err := ts.client().Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		t.Fatal(err)
	}
	return resp, b
}

// retrySeries is a reference and three frames shifted by 0, 1 and 2 px.
type retrySeries struct {
	ct     string
	ref    []byte
	frames [][]byte
}

func newRetrySeries(t testing.TB) retrySeries {
	var rs retrySeries
	ref := encodePNG(t, speckle(32, 32, 0, 0, 71))
	rs.ct, rs.ref = multipartBody(t, part{"reference", "ref.png", "image/png", ref}, part{"params", "", "application/json", []byte(`{"subset": 15}`)})
	for i := 0; i < 3; i++ {
		rs.frames = append(rs.frames, encodePNG(t, speckle(32, 32, float64(i), 0, 71)))
	}
	return rs
}

// create posts the series (with key, twice: the repeat must answer the
// same) and returns its id.
func (rs retrySeries) create(t *testing.T, ts *testServer, key string) string {
	t.Helper()
	resp, b := ts.doKey(t, "POST", "/v1/series", rs.ct, key, rs.ref)
	if resp.StatusCode != 201 {
		t.Fatalf("POST /v1/series: %d %s", resp.StatusCode, b)
	}
	id := decodeJSON[jobDoc](t, b).ID
	if key != "" {
		resp2, b2 := ts.doKey(t, "POST", "/v1/series", rs.ct, key, rs.ref)
		if resp2.StatusCode != 201 || decodeJSON[jobDoc](t, b2).ID != id || resp2.Header.Get("Location") != resp.Header.Get("Location") {
			t.Fatalf("repeat of POST /v1/series: %d %s, want 201 with series %s", resp2.StatusCode, b2, id)
		}
	}
	return id
}

// frame posts frame i (time i+1 s) and returns the job.
func (rs retrySeries) frame(t *testing.T, ts *testServer, series string, i int, key string) jobDoc {
	t.Helper()
	resp, b := ts.doKey(t, "POST", fmt.Sprintf("/v1/series/%s/frames?time=%d", series, i+1), "image/png", key, rs.frames[i])
	if resp.StatusCode != 200 {
		t.Fatalf("frame %d: %d %s", i, resp.StatusCode, b)
	}
	return decodeJSON[jobDoc](t, b)
}

// undisturbed posts the whole series without keys and returns its
// curve.csv.
func (rs retrySeries) undisturbed(t *testing.T, ts *testServer) string {
	id := rs.create(t, ts, "")
	for i := range rs.frames {
		rs.frame(t, ts, id, i, "")
	}
	return rs.curve(t, ts, id)
}

func (rs retrySeries) curve(t *testing.T, ts *testServer, id string) string {
	t.Helper()
	resp, b := ts.do(t, "GET", "/v1/series/"+id+"/curve.csv", "", nil)
	if resp.StatusCode != 200 {
		t.Fatalf("curve.csv: %d %s", resp.StatusCode, b)
	}
	return string(b)
}

func (rs retrySeries) frameCount(t *testing.T, ts *testServer, id string) int {
	t.Helper()
	_, b := ts.do(t, "GET", "/v1/series/"+id+"/frames", "", nil)
	return len(decodeJSON[struct {
		Frames []jobDoc `json:"frames"`
	}](t, b).Frames)
}

// TestRetryLostFrameAnswer: the connection of a frame POST is cut after
// the server has stored the frame (while its job runs, held by the test
// hook); the client retries with the same key and gets the stored frame:
// the series has each frame once and its curve equals an undisturbed run.
func TestRetryLostFrameAnswer(t *testing.T) {
	h := newHolder()
	ts := newServer(t, func(c *service.Config) { c.BeforeCompute = h.hook })
	rs := newRetrySeries(t)
	id := rs.create(t, ts, "series-A")

	ctx, cut := context.WithCancel(context.Background())
	req, _ := http.NewRequestWithContext(ctx, "POST", ts.URL+"/v1/series/"+id+"/frames?time=1", bytes.NewReader(rs.frames[0]))
	req.Header.Set("Content-Type", "image/png")
	req.Header.Set("Idempotency-Key", "A-frame-0")
	lost := make(chan error, 1)
	go func() {
		resp, err := ts.client().Do(req)
		if err == nil {
			resp.Body.Close()
		}
		lost <- err
	}()
	first := h.next(t) // stored, and running
	cut()
	if err := <-lost; err == nil {
		t.Fatal("the first POST was answered; want the connection cut before")
	}
	h.release()
	again := rs.frame(t, ts, id, 0, "A-frame-0")
	if again.ID != first || again.State != "succeeded" {
		t.Fatalf("retry answered job %s (%s), want the stored %s, succeeded", again.ID, again.State, first)
	}
	for i := 1; i < len(rs.frames); i++ {
		rs.frame(t, ts, id, i, fmt.Sprintf("A-frame-%d", i))
	}
	if n := rs.frameCount(t, ts, id); n != len(rs.frames) {
		t.Fatalf("series has %d frames, want %d", n, len(rs.frames))
	}
	if got, want := rs.curve(t, ts, id), rs.undisturbed(t, ts); got != want {
		t.Fatalf("curve after the retry:\n%s\nundisturbed run:\n%s", got, want)
	}
	if n := ts.fake.runs.Load(); n != 2*int64(len(rs.frames)) {
		t.Errorf("%d frames computed, want %d (each of the two series' frames once)", n, 2*len(rs.frames))
	}
}

// TestRetryAfterSIGKILL: the server is SIGKILLed with a frame stored (held
// running, its answer never sent); after a restart on the same data the
// client retries with the same key and gets that frame, computed once
// more from its stored inputs but not stored twice.
func TestRetryAfterSIGKILL(t *testing.T) {
	dir := t.TempDir()
	p := startProc(t, dir, true, time.Second)
	rs := newRetrySeries(t)
	id := rs.create(t, p.ts, "series-K")
	go func() {
		req, _ := http.NewRequest("POST", p.ts.URL+"/v1/series/"+id+"/frames?time=1", bytes.NewReader(rs.frames[0]))
		req.Header.Set("Content-Type", "image/png")
		req.Header.Set("Idempotency-Key", "K-frame-0")
		if resp, err := http.DefaultClient.Do(req); err == nil {
			resp.Body.Close() // not expected: the job is held until the kill
		}
	}()
	poll(t, "the frame to be stored and running", func() bool {
		_, b := p.ts.do(t, "GET", "/v1/series/"+id+"/frames", "", nil)
		return strings.Contains(string(b), `"state": "running"`)
	})
	if err := p.cmd.Process.Signal(syscall.SIGKILL); err != nil {
		t.Fatal(err)
	}
	<-p.done
	p.done <- nil // for the cleanup

	p2 := startProc(t, dir, false, time.Second)
	again := rs.frame(t, p2.ts, id, 0, "K-frame-0")
	for i := 1; i < len(rs.frames); i++ {
		rs.frame(t, p2.ts, id, i, fmt.Sprintf("K-frame-%d", i))
	}
	if n := rs.frameCount(t, p2.ts, id); n != len(rs.frames) {
		t.Fatalf("series has %d frames after the kill and retry, want %d", n, len(rs.frames))
	}
	if again.Frame != 0 || again.State != "succeeded" {
		t.Fatalf("retry answered frame %d (%s), want frame 0 succeeded", again.Frame, again.State)
	}
	if got, want := rs.curve(t, p2.ts, id), rs.undisturbed(t, p2.ts); got != want {
		t.Fatalf("curve after kill and retry:\n%s\nundisturbed run:\n%s", got, want)
	}
}

// TestRetryKeyRules: the same key with another body is refused with 422
// and stores nothing; an analysis repeated with its key is one job; a key
// reused on another route is refused too.
func TestRetryKeyRules(t *testing.T) {
	ts := newServer(t, nil)
	rs := newRetrySeries(t)
	id := rs.create(t, ts, "")
	j0 := rs.frame(t, ts, id, 0, "rules-0")
	resp, b := ts.doKey(t, "POST", "/v1/series/"+id+"/frames?time=2", "image/png", "rules-0", rs.frames[1])
	pd := decodeJSON[problemDoc](t, b)
	if resp.StatusCode != 422 || !strings.HasSuffix(pd.Type, "idempotency-key-reused") || !strings.Contains(pd.Detail, "another request") {
		t.Fatalf("same key, other body: %d %s, want 422 idempotency-key-reused", resp.StatusCode, b)
	}
	if n := rs.frameCount(t, ts, id); n != 1 {
		t.Fatalf("%d frames after the refused reuse, want 1", n)
	}
	// The key still answers its own request.
	if again := rs.frame(t, ts, id, 0, "rules-0"); again.ID != j0.ID {
		t.Fatalf("repeat answered %s, want %s", again.ID, j0.ID)
	}

	ref, def := pair(t, 32, 32, 1, 0, 5)
	ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 15}`)...)
	r1, b1 := ts.doKey(t, "POST", "/v1/analyses", ct, "analysis-1", body)
	r2, b2 := ts.doKey(t, "POST", "/v1/analyses", ct, "analysis-1", body)
	if r1.StatusCode != 202 || r2.StatusCode != 202 || decodeJSON[jobDoc](t, b1).ID != decodeJSON[jobDoc](t, b2).ID ||
		r1.Header.Get("Location") != r2.Header.Get("Location") {
		t.Fatalf("analysis and its repeat: %d %s / %d %s, want 202 with one job", r1.StatusCode, b1, r2.StatusCode, b2)
	}
	_, lb := ts.do(t, "GET", "/v1/analyses", "", nil)
	if n := strings.Count(string(lb), `"kind": "analysis"`); n != 1 {
		t.Fatalf("%d analyses after a repeat, want 1:\n%s", n, lb)
	}
	if r, b := ts.doKey(t, "POST", "/v1/series", rs.ct, "analysis-1", rs.ref); r.StatusCode != 422 {
		t.Fatalf("key of an analysis on POST /v1/series: %d %s, want 422", r.StatusCode, b)
	}
	for _, bad := range []string{"", " ", "a b", `"open`, `"x"; p=1`, strings.Repeat("k", 256), "caf\u00e9"} {
		req, _ := http.NewRequest("POST", ts.URL+"/v1/series", bytes.NewReader(rs.ref))
		req.Header.Set("Content-Type", rs.ct)
		req.Header["Idempotency-Key"] = []string{bad}
		resp, err := ts.client().Do(req)
		if err != nil {
			t.Fatal(err)
		}
		b, _ := io.ReadAll(resp.Body)
		resp.Body.Close()
		if resp.StatusCode != 400 || !strings.Contains(string(b), "bad-idempotency-key") {
			t.Errorf("Idempotency-Key %q: %d %s, want 400 bad-idempotency-key", bad, resp.StatusCode, b)
		}
	}
}

// TestRetryFrameIndex: ?index= repeats of a stored frame answer with it;
// an index that skips or goes back (with another image) is 409 naming the
// next index; a time that does not increase is refused and leaves no row.
func TestRetryFrameIndex(t *testing.T) {
	ts := newServer(t, nil)
	rs := newRetrySeries(t)
	id := rs.create(t, ts, "")
	post := func(q string, img []byte) (int, []byte) {
		resp, b := ts.do(t, "POST", "/v1/series/"+id+"/frames?"+q, "image/png", img)
		return resp.StatusCode, b
	}
	st, b := post("index=0&time=1", rs.frames[0])
	if st != 200 {
		t.Fatalf("index=0: %d %s", st, b)
	}
	first := decodeJSON[jobDoc](t, b).ID
	if st, b := post("index=0&time=1", rs.frames[0]); st != 200 || decodeJSON[jobDoc](t, b).ID != first {
		t.Fatalf("repeat of index=0: %d %s, want the stored frame %s", st, b, first)
	}
	for _, q := range []string{"index=2&time=3", "index=0&time=2"} {
		st, b := post(q, rs.frames[1])
		if st != 409 || !strings.Contains(string(b), "the next index is 1") {
			t.Errorf("%s: %d %s, want 409 naming index 1", q, st, b)
		}
	}
	if st, b := post("index=-1", rs.frames[1]); st != 400 {
		t.Errorf("index=-1: %d %s, want 400", st, b)
	}
	// The bug of issue 23: a retry refused for its time stamp stayed in
	// the curve as a failed frame.
	before := rs.curve(t, ts, id)
	st, b = post("time=1", rs.frames[0])
	if st != 422 || !strings.Contains(string(b), "time stamps must increase") && !strings.Contains(string(b), "Time stamps must increase") {
		t.Fatalf("repeated time without key: %d %s, want 422", st, b)
	}
	if n := rs.frameCount(t, ts, id); n != 1 {
		t.Fatalf("%d frames after the refused time, want 1", n)
	}
	if after := rs.curve(t, ts, id); after != before {
		t.Fatalf("curve changed by a refused frame:\n%s\nbefore:\n%s", after, before)
	}
	if st, b := post("index=1&time=2", rs.frames[1]); st != 200 || decodeJSON[jobDoc](t, b).Frame != 1 {
		t.Fatalf("index=1: %d %s", st, b)
	}
}

// TestRetryConcurrentDuplicates: eight copies of one frame POST with the
// same key at once make one frame, and every copy is answered with it.
func TestRetryConcurrentDuplicates(t *testing.T) {
	h := newHolder()
	ts := newServer(t, func(c *service.Config) { c.BeforeCompute = h.hook })
	rs := newRetrySeries(t)
	id := rs.create(t, ts, "")
	const n = 8
	ids := make([]string, n)
	var wg sync.WaitGroup
	for i := range ids {
		wg.Add(1)
		go func() {
			defer wg.Done()
			resp, b := ts.doKey(t, "POST", "/v1/series/"+id+"/frames?time=1", "image/png", "dup", rs.frames[0])
			if resp.StatusCode == 200 {
				ids[i] = decodeJSON[jobDoc](t, b).ID
			}
		}()
	}
	h.next(t)
	h.release()
	wg.Wait()
	for i, got := range ids {
		if got == "" || got != ids[0] {
			t.Fatalf("copy %d answered %q, copy 0 %q: want one frame for all", i, got, ids[0])
		}
	}
	if c := rs.frameCount(t, ts, id); c != 1 {
		t.Fatalf("%d frames from %d copies of one request, want 1", c, n)
	}
}

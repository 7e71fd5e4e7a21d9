package service_test

import (
	"context"
	"io"
	"log/slog"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/embedded"
)

// serverOn starts a server with the real pipeline on the data directory
// dir; close stops it and closes its backend, so another can open dir.
func serverOn(t *testing.T, dir string) (ts *testServer, close func()) {
	t.Helper()
	be, err := embedded.Open(dir, 64)
	if err != nil {
		t.Fatal(err)
	}
	s, err := service.New(service.Config{Backend: be, Analyzer: service.Pipeline{}, Workers: 2,
		Logger: slog.New(slog.NewJSONHandler(io.Discard, nil)), ShutdownGrace: 5 * time.Second})
	if err != nil {
		t.Fatal(err)
	}
	stop, err := s.Start(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	hs := httptest.NewServer(s.Handler())
	done := false
	close = func() {
		if !done {
			done = true
			hs.Close()
			stop()
			be.Close()
		}
	}
	t.Cleanup(close)
	return &testServer{Server: hs, srv: s, stop: stop}, close
}

// TestLiveFrameIdempotencyKey: a live frame sent again with its
// Idempotency-Key is answered with the first answer and takes no second
// frame; the key with another request is refused with 422 (the rules of
// the other creating POSTs, pkg/service/idempotency.go).
func TestLiveFrameIdempotencyKey(t *testing.T) {
	ts, _ := serverOn(t, t.TempDir())
	ref, frames, _ := loadSeriesPNG(t)
	sid := createSeries(t, ts, ref, trackerParams)
	path := "/v1/series/" + sid + "/live/frames?time=1"
	resp, first := ts.doKey(t, "POST", path, "image/png", "live-1", frames[0])
	if resp.StatusCode != 200 {
		t.Fatalf("live frame: %d %s", resp.StatusCode, first)
	}
	resp, again := ts.doKey(t, "POST", path, "image/png", "live-1", frames[0])
	if resp.StatusCode != 200 || string(again) != string(first) {
		t.Fatalf("repeat with the key: %d\n%s\nwant the first answer\n%s", resp.StatusCode, again, first)
	}
	resp, b := ts.doKey(t, "POST", "/v1/series/"+sid+"/live/frames?time=2", "image/png", "live-1", frames[1])
	if pd := decodeJSON[problemDoc](t, b); resp.StatusCode != 422 || !strings.HasSuffix(pd.Type, "idempotency-key-reused") {
		t.Fatalf("the key with another request: %d %s, want 422 idempotency-key-reused", resp.StatusCode, b)
	}
	resp, b = ts.doKey(t, "POST", "/v1/series/"+sid+"/live/frames?time=2", "image/png", "live-2", frames[1])
	if v := decodeJSON[liveDoc](t, b); resp.StatusCode != 200 || v.Index != 2 {
		t.Fatalf("next frame: %d %s, want index 2 (the repeat took no frame)", resp.StatusCode, b)
	}
	if v := decodeJSON[liveDoc](t, first); v.Index != 1 {
		t.Fatalf("first frame answered index %d, want 1", v.Index)
	}
}

// TestLiveAfterRestart: live sessions are kept in memory; a restarted
// service on the same data refuses the series' live routes with a 409
// live-ended problem document (it does not start a second session whose
// frame numbers would clash with the first), also for a repeat of a keyed
// live frame, while the series itself and its full-field frames stay.
func TestLiveAfterRestart(t *testing.T) {
	dir := t.TempDir()
	ts, closeFirst := serverOn(t, dir)
	ref, frames, _ := loadSeriesPNG(t)
	sid := createSeries(t, ts, ref, trackerParams)
	base := "/v1/series/" + sid
	if resp, b := ts.do(t, "POST", base+"/live", "application/json", []byte(`{"full": "every"}`)); resp.StatusCode != 201 {
		t.Fatalf("POST live: %d %s", resp.StatusCode, b)
	}
	resp, b := ts.doKey(t, "POST", base+"/live/frames?time=1", "image/png", "before-restart", frames[0])
	if resp.StatusCode != 200 {
		t.Fatalf("live frame: %d %s", resp.StatusCode, b)
	}
	if decodeJSON[liveDoc](t, b).Job == "" {
		t.Fatalf("frame due for the full field has no job: %s", b)
	}
	ts.waitDone(t, base+"/frames/0")
	closeFirst()

	ts2, _ := serverOn(t, dir)
	for _, c := range []struct{ method, path, ctype, key string }{
		{"POST", base + "/live/frames?time=2", "image/png", ""},
		{"POST", base + "/live/frames?time=1", "image/png", "before-restart"},
		{"POST", base + "/live", "application/json", ""},
		{"GET", base + "/live/events", "", ""},
		{"POST", base + "/live/frames/1/full", "", ""},
	} {
		body := []byte(nil)
		if c.ctype == "image/png" {
			body = frames[0]
			if c.key == "" {
				body = frames[1]
			}
		}
		resp, b := ts2.doKey(t, c.method, c.path, c.ctype, c.key, body)
		pd := decodeJSON[problemDoc](t, b)
		if resp.StatusCode != 409 || !strings.HasSuffix(pd.Type, "live-ended") || !strings.Contains(pd.Detail, "restart") {
			t.Errorf("%s %s (key %q) after a restart: %d %s, want 409 live-ended", c.method, c.path, c.key, resp.StatusCode, b)
		}
	}
	if resp, b := ts2.do(t, "GET", base+"/curve.csv", "", nil); resp.StatusCode != 200 || strings.Count(strings.TrimSpace(string(b)), "\n") != 2 {
		t.Errorf("curve after a restart: %d\n%s\nwant the header, the reference and the full-field frame", resp.StatusCode, b)
	}
}

package service_test

import (
	"bytes"
	"context"
	"log/slog"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/embedded"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// TestDamagedDataDir damages a data directory the way a crash outside
// Mottle or a person's hand would: one succeeded job's field.npz cut to
// half its size, another's field.csv cut by one byte, the whole blob
// folder of a third deleted (its record points nowhere), and the deformed
// image of a job still queued deleted. On the next start the service
// logs each, marks those four jobs failed with the reason, does not run
// the queued one, and serves the untouched job as before.
func TestDamagedDataDir(t *testing.T) {
	dir := t.TempDir()
	start := func(hook func(context.Context, jobs.Job)) (*testServer, func(), *syncBuffer) {
		t.Helper()
		be, err := embedded.Open(dir, 16)
		if err != nil {
			t.Fatal(err)
		}
		logs := &syncBuffer{}
		s, err := service.New(service.Config{Backend: be, Analyzer: service.Pipeline{}, Workers: 1,
			Logger: slog.New(slog.NewJSONHandler(logs, nil)), ShutdownGrace: 200 * time.Millisecond,
			DataDir: dir, MinFreeBytes: 1 << 20, BeforeCompute: hook})
		if err != nil {
			t.Fatal(err)
		}
		stop, err := s.Start(context.Background())
		if err != nil {
			t.Fatal(err)
		}
		hs := httptest.NewServer(s.Handler())
		var once sync.Once
		shut := func() { once.Do(func() { hs.Close(); stop(); be.Close() }) }
		t.Cleanup(shut)
		return &testServer{Server: hs, srv: s}, shut, logs
	}
	h := newHolder()
	h.free.Store(4)
	ts, shut, _ := start(h.hook)
	ref, def := pair(t, 96, 96, 2, 1, 5)
	ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 21, "step": 8}`)...)
	var ids []string
	for i := 0; i < 5; i++ {
		resp, b := ts.do(t, "POST", "/v1/analyses?formats=npz,csv", ct, body)
		if resp.StatusCode != 202 {
			t.Fatalf("submit: %d %s", resp.StatusCode, b)
		}
		id := decodeJSON[jobDoc](t, b).ID
		ids = append(ids, id)
		if h.next(t); i < 4 {
			if j := ts.waitDone(t, "/v1/analyses/"+id); j.State != "succeeded" {
				t.Fatalf("job %d: %s %+v", i, j.State, j.Error)
			}
		}
	}
	_, keep := ts.do(t, "GET", "/v1/analyses/"+ids[3]+"/field.csv", "", nil)
	shut() // the fifth job, held running, goes back to the queue

	blob := func(id string, parts ...string) string {
		return filepath.Join(append([]string{dir, "blobs", "jobs", id}, parts...)...)
	}
	cut := func(p string, by func(int64) int64) {
		st, err := os.Stat(p)
		if err != nil {
			t.Fatal(err)
		}
		if err := os.Truncate(p, by(st.Size())); err != nil {
			t.Fatal(err)
		}
	}
	cut(blob(ids[0], "out", "field.npz"), func(n int64) int64 { return n / 2 })
	cut(blob(ids[1], "out", "field.csv"), func(n int64) int64 { return n - 1 })
	if err := os.RemoveAll(blob(ids[2])); err != nil {
		t.Fatal(err)
	}
	if err := os.Remove(blob(ids[4], "in", "deformed")); err != nil {
		t.Fatal(err)
	}

	ts, _, logs := start(nil)
	want := map[string]string{ids[0]: "field.npz", ids[1]: "field.csv", ids[2]: "missing", ids[4]: "deformed"}
	for id, file := range want {
		resp, b := ts.do(t, "GET", "/v1/analyses/"+id, "", nil)
		j := decodeJSON[jobDoc](t, b)
		if resp.StatusCode != 200 || j.State != "failed" || j.Error == nil || j.Error.Title != "Damaged data" || !strings.Contains(j.Error.Detail, file) {
			t.Errorf("damaged job %s: %d %s %+v, want failed naming %s", id, resp.StatusCode, j.State, j.Error, file)
		}
		if !strings.Contains(logs.String(), id) {
			t.Errorf("the start log does not name damaged job %s", id)
		}
	}
	if j := ts.waitDone(t, "/v1/analyses/"+ids[3]); j.State != "succeeded" {
		t.Fatalf("untouched job: %s %+v", j.State, j.Error)
	}
	if resp, b := ts.do(t, "GET", "/v1/analyses/"+ids[3]+"/field.csv", "", nil); resp.StatusCode != 200 || !bytes.Equal(b, keep) {
		t.Fatalf("untouched job's field.csv: %d, %d bytes, want %d", resp.StatusCode, len(b), len(keep))
	}
	_, m := ts.do(t, "GET", "/metrics", "", nil)
	if n := metricValue(t, string(m), "mottle_data_damaged_jobs"); n != 4 {
		t.Errorf("mottle_data_damaged_jobs = %v, want 4", n)
	}
	if !strings.Contains(logs.String(), `"damaged":4`) {
		t.Errorf("no start summary with damaged 4 in the log:\n%s", logs.String())
	}
}

package service_test

import (
	"bytes"
	"context"
	"encoding/json"
	"io"
	"log/slog"
	"net/http/httptest"
	"sort"
	"syscall"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/embedded"
)

// BenchmarkLatency512 measures one request at a time, the figure of issue
// 13's service target: a 512×512 8-bit PNG pair (subset 31, step 16)
// posted to POST /v1/analyses?wait=true through the service's handler
// (httptest recorder, no network), the answer read in full. It reports the
// p50 and p99 latency in ms and the median split of a request from the
// job record's times: before the job starts (upload, decode, checks,
// storing the inputs), the job itself (started → finished) and after it
// (reading the result, writing the answer). "sync" is the default
// backend, which fsyncs every write; "nosync" shows what the fsyncs cost.
// cpu-ms/req is the process's CPU time per request (user + sys).
func BenchmarkLatency512(b *testing.B) {
	for _, c := range []struct {
		name   string
		noSync bool
	}{{"sync", false}, {"nosync", true}} {
		b.Run(c.name, func(b *testing.B) { benchLatency(b, c.noSync) })
	}
}

func benchLatency(b *testing.B, noSync bool) {
	be, err := embedded.OpenWith(b.TempDir(), embedded.Options{QueueCap: 256, NoSync: noSync})
	if err != nil {
		b.Fatal(err)
	}
	defer be.Close()
	s, err := service.New(service.Config{Backend: be, Analyzer: service.Pipeline{}, Workers: 2,
		Logger: slog.New(slog.NewJSONHandler(io.Discard, nil))})
	if err != nil {
		b.Fatal(err)
	}
	stop, _ := s.Start(context.Background())
	defer stop()
	h := s.Handler()
	ref, def := realPair(b, 512, 2.4, -1.7)
	ct, body := multipartBody(b, analysisParts(ref, def, `{"subset": 31, "step": 16}`)...)
	var lat, before, job, after []time.Duration
	c0 := cpuTime()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		t0 := time.Now()
		req := httptest.NewRequest("POST", "/v1/analyses?wait=true", bytes.NewReader(body))
		req.Header.Set("Content-Type", ct)
		rec := httptest.NewRecorder()
		h.ServeHTTP(rec, req)
		t1 := time.Now()
		if rec.Code != 200 {
			b.Fatalf("status %d: %s", rec.Code, rec.Body.Bytes())
		}
		lat = append(lat, t1.Sub(t0))
		var v struct{ Started, Finished time.Time }
		if err := json.Unmarshal(rec.Body.Bytes(), &v); err != nil {
			b.Fatal(err)
		}
		before, job, after = append(before, v.Started.Sub(t0)), append(job, v.Finished.Sub(v.Started)), append(after, t1.Sub(v.Finished))
	}
	b.StopTimer()
	cpu := cpuTime() - c0
	pct := func(d []time.Duration, p float64) float64 {
		sort.Slice(d, func(i, j int) bool { return d[i] < d[j] })
		return float64(d[min(len(d)-1, int(p*float64(len(d))))].Microseconds()) / 1000
	}
	b.ReportMetric(pct(lat, 0.50), "p50-ms")
	b.ReportMetric(pct(lat, 0.99), "p99-ms")
	b.ReportMetric(pct(before, 0.5), "before-ms")
	b.ReportMetric(pct(job, 0.5), "job-ms")
	b.ReportMetric(pct(after, 0.5), "after-ms")
	b.ReportMetric(float64(cpu.Microseconds())/1000/float64(b.N), "cpu-ms/req")
}

// cpuTime returns the user + system CPU time of the process so far: on a
// shared machine, CPU per request is the figure to compare.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

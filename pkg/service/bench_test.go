package service_test

import (
	"bytes"
	"context"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"runtime"
	"sort"
	"sync"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/embedded"
)

// BenchmarkAnalyze512 measures the service end to end on 127.0.0.1: each
// request posts a 512×512 pair (subset 31, step 16) with ?wait=true and
// reads the result, from as many concurrent clients as there are workers.
// It reports requests per second and latency percentiles.
func BenchmarkAnalyze512(b *testing.B) {
	be, err := embedded.Open(b.TempDir(), 256)
	if err != nil {
		b.Fatal(err)
	}
	defer be.Close()
	workers := runtime.GOMAXPROCS(0)
	s, err := service.New(service.Config{Backend: be, Analyzer: service.Pipeline{}, Workers: workers,
		Logger: slog.New(slog.NewJSONHandler(io.Discard, nil))})
	if err != nil {
		b.Fatal(err)
	}
	stop, _ := s.Start(context.Background())
	defer stop()
	hs := httptest.NewServer(s.Handler())
	defer hs.Close()
	ref, def := realPair(b, 512, 2.4, -1.7)
	ct, body := multipartBody(b, analysisParts(ref, def, `{"subset": 31, "step": 16}`)...)

	var mu sync.Mutex
	var lat []time.Duration
	next := make(chan struct{})
	var wg sync.WaitGroup
	b.ResetTimer()
	start := time.Now()
	for c := 0; c < workers; c++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for range next {
				t0 := time.Now()
				req, _ := http.NewRequest("POST", hs.URL+"/v1/analyses?wait=true", bytes.NewReader(body))
				req.Header.Set("Content-Type", ct)
				resp, err := hs.Client().Do(req)
				if err != nil {
					b.Error(err)
					return
				}
				io.Copy(io.Discard, resp.Body)
				resp.Body.Close()
				if resp.StatusCode != 200 {
					b.Errorf("status %d", resp.StatusCode)
				}
				mu.Lock()
				lat = append(lat, time.Since(t0))
				mu.Unlock()
			}
		}()
	}
	for i := 0; i < b.N; i++ {
		next <- struct{}{}
	}
	close(next)
	wg.Wait()
	elapsed := time.Since(start)
	b.StopTimer()
	sort.Slice(lat, func(i, j int) bool { return lat[i] < lat[j] })
	pct := func(p float64) float64 {
		if len(lat) == 0 {
			return 0
		}
		return float64(lat[min(len(lat)-1, int(p*float64(len(lat))))].Microseconds()) / 1000
	}
	b.ReportMetric(float64(b.N)/elapsed.Seconds(), "req/s")
	b.ReportMetric(pct(0.50), "p50-ms")
	b.ReportMetric(pct(0.90), "p90-ms")
	b.ReportMetric(pct(0.99), "p99-ms")
}

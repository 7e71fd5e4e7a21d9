package service_test

import (
	"bytes"
	"fmt"
	"image"
	"math/rand/v2"
	"net/http"
	"os"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service"
)

// limitsFromEnv sets the resource limits of a server subprocess from
// MOTTLE_TEST_WORKERS, MOTTLE_TEST_MAXMEM (bytes; -1 = no budget),
// MOTTLE_TEST_MEMWAIT and MOTTLE_TEST_RETENTION (durations).
func limitsFromEnv(cfg *service.Config) error {
	if v := os.Getenv("MOTTLE_TEST_RETENTION"); v != "" {
		d, err := time.ParseDuration(v)
		if err != nil {
			return fmt.Errorf("MOTTLE_TEST_RETENTION: %w", err)
		}
		cfg.Retention = d
	}
	if v := os.Getenv("MOTTLE_TEST_WORKERS"); v != "" {
		n, err := strconv.Atoi(v)
		if err != nil {
			return fmt.Errorf("MOTTLE_TEST_WORKERS: %w", err)
		}
		cfg.Workers = n
	}
	if v := os.Getenv("MOTTLE_TEST_MAXMEM"); v != "" {
		n, err := strconv.ParseInt(v, 10, 64)
		if err != nil {
			return fmt.Errorf("MOTTLE_TEST_MAXMEM: %w", err)
		}
		cfg.MaxMemory = n
	}
	if v := os.Getenv("MOTTLE_TEST_MEMWAIT"); v != "" {
		d, err := time.ParseDuration(v)
		if err != nil {
			return fmt.Errorf("MOTTLE_TEST_MEMWAIT: %w", err)
		}
		cfg.MemoryWait = d
	}
	return nil
}

// valueNoise renders a w×h 8-bit random pattern with features of about
// 3 px (random grey levels on a 3 px lattice, bilinearly joined), shown
// shifted by the integer (dx, dy): invented test data, fast to make at
// megapixel sizes, with an exact displacement.
func valueNoise(w, h, dx, dy int, seed uint64) *image.Gray {
	const cell = 3
	r := rand.New(rand.NewPCG(seed, 11))
	gw, gh := (w+cell*4)/cell+2, (h+cell*4)/cell+2
	lat := make([]float64, gw*gh)
	for i := range lat {
		lat[i] = 20 + 215*r.Float64()
	}
	img := image.NewGray(image.Rect(0, 0, w, h))
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			X, Y := x-dx+cell*2, y-dy+cell*2
			i, j := X/cell, Y/cell
			fx, fy := float64(X%cell)/cell, float64(Y%cell)/cell
			v := lat[j*gw+i]*(1-fx)*(1-fy) + lat[j*gw+i+1]*fx*(1-fy) + lat[(j+1)*gw+i]*(1-fx)*fy + lat[(j+1)*gw+i+1]*fx*fy
			img.Pix[y*img.Stride+x] = uint8(v)
		}
	}
	return img
}

// peakRSS returns the peak resident memory (VmHWM) of process pid, bytes.
func peakRSS(t *testing.T, pid int) int64 {
	t.Helper()
	return procStatus(t, pid, "VmHWM")
}

// procStatus returns the field (in kB there) of /proc/pid/status, bytes.
func procStatus(t *testing.T, pid int, field string) int64 {
	t.Helper()
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/status", pid))
	if err != nil {
		t.Fatal(err)
	}
	for _, line := range strings.Split(string(b), "\n") {
		if v, ok := strings.CutPrefix(line, field+":"); ok {
			kb, err := strconv.ParseInt(strings.TrimSpace(strings.TrimSuffix(strings.TrimSpace(v), "kB")), 10, 64)
			if err != nil {
				t.Fatal(err)
			}
			return kb << 10
		}
	}
	t.Fatalf("no %s in /proc/%d/status", field, pid)
	return 0
}

// TestMemoryBudget sends six concurrent uploads of 1500×1500 px pairs to
// a server process with four workers, running the real pipeline, under
// GOMEMLIMIT=400MiB and the budget derived from it (300 MiB). Each job
// needs about 310 MiB by the service's estimate, more than the budget, so
// it takes all of it and computes alone, and the uploads wait for it. Every upload is accepted
// or answered 503 with Retry-After, every accepted job succeeds, the
// budget is never exceeded, and the process's peak resident memory stays
// under the Go memory limit plus a fixed margin for the runtime and the
// binary. (A 60 Mpx pair would hold 8.6 GB a job the same way; the test
// keeps CI's images small.) The same uploads without a budget are run
// for the log, as the baseline of the figure in README.
func TestMemoryBudget(t *testing.T) {
	const w, h, uploads = 1500, 1500, 6
	const limit = 400 << 20
	ref := encodePNG(t, valueNoise(w, h, 0, 0, 1))
	def := encodePNG(t, valueNoise(w, h, 2, 1, 1))
	ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 21, "step": 50}`)...)
	run := func(maxMem string) (peak int64, accepted, busy int, metrics string) {
		dir := t.TempDir()
		p := startProc(t, dir, false, time.Second, "GOMEMLIMIT=400MiB", "MOTTLE_TEST_ANALYZER=pipeline",
			"MOTTLE_TEST_WORKERS=4", "MOTTLE_TEST_MAXMEM="+maxMem, "MOTTLE_TEST_MEMWAIT=60s", "GOMAXPROCS=2")
		var wg sync.WaitGroup
		var mu sync.Mutex
		var ids []string
		for i := 0; i < uploads; i++ {
			wg.Add(1)
			go func() {
				defer wg.Done()
				req, _ := http.NewRequest("POST", p.ts.URL+"/v1/analyses", bytes.NewReader(body))
				req.Header.Set("Content-Type", ct)
				resp, err := http.DefaultClient.Do(req)
				if err != nil {
					t.Errorf("upload: %v", err)
					return
				}
				var b bytes.Buffer
				b.ReadFrom(resp.Body)
				resp.Body.Close()
				mu.Lock()
				defer mu.Unlock()
				switch {
				case resp.StatusCode == 202:
					ids = append(ids, decodeJSON[jobDoc](t, b.Bytes()).ID)
				case resp.StatusCode == 503 && resp.Header.Get("Retry-After") != "":
					busy++
				default:
					t.Errorf("upload answered %d %s", resp.StatusCode, b.Bytes())
				}
			}()
		}
		wg.Wait()
		for _, id := range ids {
			if j := p.ts.waitDone(t, "/v1/analyses/"+id); j.State != "succeeded" {
				t.Errorf("job %s: %s %+v", id, j.State, j.Error)
			} else if u := j.Summary.Mean["u"]; u < 1.9 || u > 2.1 {
				t.Errorf("job %s: mean u = %v px, want the shift of 2 px", id, u)
			}
		}
		_, mb := p.ts.do(t, "GET", "/metrics", "", nil)
		return peakRSS(t, p.cmd.Process.Pid), len(ids), busy, string(mb)
	}

	peak, accepted, busy, m := run("0")
	if accepted == 0 {
		t.Fatal("no upload was accepted")
	}
	budget := metricValue(t, m, "mottle_memory_budget_bytes")
	if budget != limit/4*3 {
		t.Fatalf("derived budget = %v, want 3/4 of GOMEMLIMIT = %d", budget, limit/4*3)
	}
	if held := metricValue(t, m, "mottle_memory_held_peak_bytes"); held > budget || held == 0 {
		t.Fatalf("peak memory held = %v, want within the budget of %v", held, budget)
	}
	const margin = 96 << 20 // runtime, binary, goroutine stacks, estimate slack
	t.Logf("budget %.0f MiB (GOMEMLIMIT 400 MiB): %d accepted, %d answered 503, %.0f waits for memory; peak RSS %.0f MiB",
		budget/(1<<20), accepted, busy, metricValue(t, m, "mottle_memory_waits_total"), float64(peak)/(1<<20))
	if peak > limit+margin {
		t.Errorf("peak resident memory %.0f MiB, over GOMEMLIMIT + %d MiB", float64(peak)/(1<<20), margin>>20)
	}
	if !t.Failed() {
		bpeak, _, _, _ := run("-1")
		t.Logf("baseline without a budget, same uploads: peak RSS %.0f MiB (%.2f× the budgeted run)", float64(bpeak)/(1<<20), float64(bpeak)/float64(peak))
	}
}

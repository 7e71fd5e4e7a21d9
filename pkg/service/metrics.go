package service

import (
	"context"
	"fmt"
	"io"
	"sort"
	"strconv"
	"sync"
	"time"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// latencyBuckets are the upper bounds, in seconds, of the request latency
// histogram.
var latencyBuckets = [...]float64{0.001, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 30, 60}

type histogram struct {
	counts [len(latencyBuckets)]uint64
	count  uint64
	sum    float64
}

type routeKey struct{ method, route string }

// metrics are the counters behind /metrics, written by hand in the
// Prometheus text exposition format (version 0.0.4).
type metrics struct {
	mu       sync.Mutex
	latency  map[routeKey]*histogram
	requests map[int]uint64 // by status code
	rejected uint64
	// auditFailures counts audit entries that could not be stored.
	auditFailures uint64
}

func newMetrics() *metrics {
	return &metrics{latency: map[routeKey]*histogram{}, requests: map[int]uint64{}}
}

func (m *metrics) observeRequest(method, route string, status int, d time.Duration) {
	m.mu.Lock()
	defer m.mu.Unlock()
	k := routeKey{method, route}
	h := m.latency[k]
	if h == nil {
		h = &histogram{}
		m.latency[k] = h
	}
	sec := d.Seconds()
	for i, b := range latencyBuckets {
		if sec <= b {
			h.counts[i]++
		}
	}
	h.count++
	h.sum += sec
	m.requests[status]++
}

func (m *metrics) auditFailed() {
	m.mu.Lock()
	m.auditFailures++
	m.mu.Unlock()
}

func (m *metrics) reject() {
	m.mu.Lock()
	m.rejected++
	m.mu.Unlock()
}

// write writes every metric to w.
func (s *Server) writeMetrics(ctx context.Context, w io.Writer) error {
	counts, err := s.store.Counts(ctx)
	if err != nil {
		return err
	}
	js := s.run.Stats()
	m := s.metrics
	m.mu.Lock()
	defer m.mu.Unlock()
	p := func(format string, args ...any) { fmt.Fprintf(w, format, args...) }
	p("# HELP mottle_queue_depth Jobs waiting for a worker.\n# TYPE mottle_queue_depth gauge\nmottle_queue_depth %d\n", s.queue.Len())
	p("# HELP mottle_queue_capacity Largest queue depth accepted before answering 429.\n# TYPE mottle_queue_capacity gauge\nmottle_queue_capacity %d\n", s.queue.Cap())
	p("# HELP mottle_workers Size of the worker pool.\n# TYPE mottle_workers gauge\nmottle_workers %d\n", s.cfg.Workers)
	p("# HELP mottle_workers_busy Workers computing a job now.\n# TYPE mottle_workers_busy gauge\nmottle_workers_busy %d\n", js.Busy)
	p("# HELP mottle_jobs Jobs in the store by state.\n# TYPE mottle_jobs gauge\n")
	for _, st := range jobs.States() {
		p("mottle_jobs{state=%q} %d\n", st, counts[st])
	}
	p("# HELP mottle_jobs_finished_total Jobs finished by this process, by final state.\n# TYPE mottle_jobs_finished_total counter\n")
	for _, st := range []jobs.State{jobs.Succeeded, jobs.Failed, jobs.Canceled} {
		p("mottle_jobs_finished_total{state=%q} %d\n", st, js.Finished[st])
	}
	p("# HELP mottle_jobs_rejected_total Submissions answered 429 because the queue was full.\n# TYPE mottle_jobs_rejected_total counter\nmottle_jobs_rejected_total %d\n", m.rejected)
	p("# HELP mottle_audit_failures_total Audit entries of changes that happened but could not be stored (each logged in full at level ERROR).\n# TYPE mottle_audit_failures_total counter\nmottle_audit_failures_total %d\n", m.auditFailures)
	p("# HELP mottle_jobs_recovered_total Jobs put back in the queue at start from an earlier run.\n# TYPE mottle_jobs_recovered_total counter\nmottle_jobs_recovered_total %d\n", js.Recovered)
	p("# HELP mottle_frames_solved_ahead_total Series frames correlated before their predecessor finished.\n# TYPE mottle_frames_solved_ahead_total counter\nmottle_frames_solved_ahead_total %d\n", js.SolvedAhead)
	p("# HELP mottle_series_max_frames_in_flight Bound on the frames of one new series computed at once.\n# TYPE mottle_series_max_frames_in_flight gauge\nmottle_series_max_frames_in_flight %d\n", s.cfg.MaxFramesInFlight)
	p("# HELP mottle_series_frames_in_flight Frames of a series this process is computing now, by series.\n# TYPE mottle_series_frames_in_flight gauge\n")
	ids := make([]string, 0, len(js.InFlight))
	for id := range js.InFlight {
		ids = append(ids, id)
	}
	sort.Strings(ids)
	for _, id := range ids {
		p("mottle_series_frames_in_flight{series=%q} %d\n", id, js.InFlight[id])
	}
	p("# HELP mottle_points_total Grid points computed by succeeded jobs.\n# TYPE mottle_points_total counter\nmottle_points_total %d\n", js.Points)
	p("# HELP mottle_compute_seconds_total Compute time of succeeded jobs.\n# TYPE mottle_compute_seconds_total counter\nmottle_compute_seconds_total %s\n", fmtFloat(js.ComputeSeconds))
	p("# HELP mottle_points_per_second Grid points per second per job, averaged over recent jobs.\n# TYPE mottle_points_per_second gauge\nmottle_points_per_second %s\n", fmtFloat(js.Rate))

	codes := make([]int, 0, len(m.requests))
	for c := range m.requests {
		codes = append(codes, c)
	}
	sort.Ints(codes)
	p("# HELP mottle_http_requests_total HTTP requests by status code.\n# TYPE mottle_http_requests_total counter\n")
	for _, c := range codes {
		p("mottle_http_requests_total{code=\"%d\"} %d\n", c, m.requests[c])
	}
	keys := make([]routeKey, 0, len(m.latency))
	for k := range m.latency {
		keys = append(keys, k)
	}
	sort.Slice(keys, func(a, b int) bool {
		if keys[a].route != keys[b].route {
			return keys[a].route < keys[b].route
		}
		return keys[a].method < keys[b].method
	})
	p("# HELP mottle_http_request_duration_seconds HTTP request latency by route.\n# TYPE mottle_http_request_duration_seconds histogram\n")
	for _, k := range keys {
		h := m.latency[k]
		lbl := fmt.Sprintf("method=%q,route=%q", k.method, k.route)
		for i, b := range latencyBuckets {
			p("mottle_http_request_duration_seconds_bucket{%s,le=%q} %d\n", lbl, fmtFloat(b), h.counts[i])
		}
		p("mottle_http_request_duration_seconds_bucket{%s,le=\"+Inf\"} %d\n", lbl, h.count)
		p("mottle_http_request_duration_seconds_sum{%s} %s\n", lbl, fmtFloat(h.sum))
		p("mottle_http_request_duration_seconds_count{%s} %d\n", lbl, h.count)
	}
	s.writeLimitMetrics(w)
	return nil
}

func fmtFloat(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

package service

import (
	"context"
	"fmt"
	"io"
	"net/http"
)

// admission counts the requests in flight, puts the minimum-rate rule
// on request bodies, refuses requests that would store data while the data
// directory is low on space (507, before the body is read), and gives
// every POST its hold of the memory budget, released when it ends.
func (s *Server) admission(next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		s.inflight.Add(1)
		defer s.inflight.Add(-1)
		r = s.limitRate(w, r)
		if s.disk != nil && storesData(r) {
			if low, free := s.disk.low(); low {
				retryAfter(w, 60)
				writeProblem(w, r, s.disk.lowDiskProblem(free))
				return
			}
		}
		if s.mem != nil && r.Method == http.MethodPost {
			var h *memHold
			if r, h = s.holdMemory(w, r); h == nil {
				return
			}
			defer h.release()
		}
		next.ServeHTTP(w, r)
	})
}

// notReady returns why /readyz should answer 503 for lack of resources,
// or nil.
func (s *Server) notReady() *Problem {
	if s.disk != nil {
		if low, free := s.disk.low(); low {
			p := s.disk.lowDiskProblem(free)
			p.Status, p.Type = http.StatusServiceUnavailable, "urn:mottle:problem:low-disk-space"
			return p
		}
	}
	return nil
}

// writeLimitMetrics writes the metrics of the resource limits.
func (s *Server) writeLimitMetrics(w io.Writer) {
	p := func(format string, args ...any) { fmt.Fprintf(w, format, args...) }
	if g := s.disk; g != nil {
		_, free := g.low()
		p("# HELP mottle_data_free_bytes Bytes free in the data directory's file system (-1 when it cannot be read).\n# TYPE mottle_data_free_bytes gauge\nmottle_data_free_bytes %d\n", free)
		p("# HELP mottle_data_min_free_bytes Free space below which the service takes no new uploads and is not ready.\n# TYPE mottle_data_min_free_bytes gauge\nmottle_data_min_free_bytes %d\n", g.minFree)
		p("# HELP mottle_data_reserve_bytes Bytes held in the reserve file, given up when a write finds the disk full.\n# TYPE mottle_data_reserve_bytes gauge\nmottle_data_reserve_bytes %d\n", g.reserveHeld())
		p("# HELP mottle_data_damaged_jobs Jobs marked failed at start because their stored files were damaged or gone.\n# TYPE mottle_data_damaged_jobs gauge\nmottle_data_damaged_jobs %d\n", s.damaged.Load())
		p("# HELP mottle_storage_full_total Writes that failed for lack of space.\n# TYPE mottle_storage_full_total counter\nmottle_storage_full_total %d\n", g.full.Load())
	}
	if s.mem != nil {
		st := s.mem.stats()
		p("# HELP mottle_memory_budget_bytes Memory budget of uploads being decoded and jobs being computed.\n# TYPE mottle_memory_budget_bytes gauge\nmottle_memory_budget_bytes %d\n", st.total)
		p("# HELP mottle_memory_held_bytes Memory of the budget held now (estimated from image sizes).\n# TYPE mottle_memory_held_bytes gauge\nmottle_memory_held_bytes %d\n", st.used)
		p("# HELP mottle_memory_held_peak_bytes Largest memory of the budget held at once since start.\n# TYPE mottle_memory_held_peak_bytes gauge\nmottle_memory_held_peak_bytes %d\n", st.peak)
		p("# HELP mottle_memory_waiting Uploads and jobs waiting for memory now.\n# TYPE mottle_memory_waiting gauge\nmottle_memory_waiting %d\n", st.waiting)
		p("# HELP mottle_memory_waits_total Uploads and jobs that had to wait for memory.\n# TYPE mottle_memory_waits_total counter\nmottle_memory_waits_total %d\n", st.waits)
		p("# HELP mottle_memory_refused_total Uploads answered 503 or 413 by the memory budget.\n# TYPE mottle_memory_refused_total counter\nmottle_memory_refused_total %d\n", st.refused)
	}
	p("# HELP mottle_http_requests_in_flight Requests being served now, event streams included.\n# TYPE mottle_http_requests_in_flight gauge\nmottle_http_requests_in_flight %d\n", s.inflight.Load())
	if rss := residentBytes(); rss >= 0 {
		p("# HELP mottle_process_resident_bytes Resident memory of the server process.\n# TYPE mottle_process_resident_bytes gauge\nmottle_process_resident_bytes %d\n", rss)
	}
}

// beforeStart runs when the service starts, before the workers: with a
// data directory it makes the disk reserve and checks the stored jobs
// (checkData). A check that cannot list the records is logged and the
// service starts anyway, serving what it can.
func (s *Server) beforeStart(ctx context.Context) error {
	if s.disk != nil {
		s.disk.refresh()
		if _, err := s.checkData(ctx); err != nil {
			s.log.Error("damaged data", "error", err)
		}
	}
	return nil
}

package service

import (
	"bytes"
	"context"
	"encoding/json"
	"net/http"
	"strings"

	"github.com/go-chi/chi/v5"

	"github.com/mottledic/mottle/api"
)

// Route prefixes of a job's resources: an analysis, or a frame of a series.
const (
	analysisPath = "/v1/analyses/{id}"
	framePath    = "/v1/series/{id}/frames/{n}"
)

func (s *Server) routes() http.Handler {
	r := chi.NewRouter()
	r.Use(s.observe, s.cors, s.admission)
	notFound := func(w http.ResponseWriter, r *http.Request) {
		writeProblem(w, r, problem(http.StatusNotFound, "not-found", "Not found", "no route matches "+r.URL.Path+"; see /v1/openapi.json"))
	}
	r.NotFound(notFound)
	r.MethodNotAllowed(func(w http.ResponseWriter, r *http.Request) {
		writeProblem(w, r, problem(http.StatusMethodNotAllowed, "method-not-allowed", "Method not allowed", r.Method+" is not allowed on "+r.URL.Path+"; see /v1/openapi.json"))
	})
	r.Get("/healthz", s.healthz)
	r.Get("/readyz", s.readyz)
	if s.cfg.UI != nil {
		// The preview's static files: no data, so no token (a browser
		// cannot send one on navigation). API paths never fall through to it.
		fs := http.FileServerFS(s.cfg.UI)
		r.Handle("/*", http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
			if p := r.URL.Path; p == "/v1" || strings.HasPrefix(p, "/v1/") || p == "/metrics" {
				notFound(w, r)
				return
			}
			fs.ServeHTTP(w, r)
		}))
	}
	r.Group(func(r chi.Router) {
		r.Use(s.authenticate)
		r.Get("/metrics", s.getMetrics)
		r.Post("/v1/stream-tickets", s.postStreamTicket)
		r.Get("/v1/principal", s.getPrincipal)
		r.Get("/v1/openapi.json", s.openapi)
		r.Get("/v1/audit", s.getAudit)
		r.Get("/v1/audit.jsonl", s.getAuditJSONL)

		r.Post("/v1/analyses", s.idempotent("analysis", s.postAnalysis))
		r.Get("/v1/analyses", s.listAnalyses)
		r.Post("/v1/demo", s.idempotent("analysis", s.postDemo))
		r.Post("/v1/images/check", s.checkImage)
		r.Post("/v1/calibrations", s.postCalibration)
		r.Post("/v1/stereo", s.idempotent("stereo", s.postStereo))
		r.Post("/v1/stereo/series", s.idempotent("series", s.postStereoSeries))
		r.Delete(analysisPath, s.analysis(s.deleteAnalysis))
		r.Patch(analysisPath, s.analysis(s.renameAnalysis))
		r.Get(analysisPath+"/thumb.png", s.analysis(s.analysisThumb))
		r.Post(analysisPath+"/cancel", s.analysis(s.cancelAnalysis))

		r.Post("/v1/series", s.idempotent("series", s.postSeries))
		r.Get("/v1/series", s.listSeries)
		r.Get("/v1/series/{id}", s.series(s.getSeries))
		r.Delete("/v1/series/{id}", s.series(s.deleteSeriesH))
		r.Patch("/v1/series/{id}", s.series(s.renameSeries))
		r.Get("/v1/series/{id}/thumb.png", s.series(s.seriesThumb))
		r.Get("/v1/series/{id}/properties.json", s.series(s.seriesProperties))
		r.Get("/v1/series/{id}/report.html", s.series(s.seriesReport))
		r.Post("/v1/series/{id}/frames", s.idempotent("frame", s.series(s.postFrame)))
		r.Get("/v1/series/{id}/frames", s.series(s.listFrames))
		r.Get("/v1/series/{id}/curve.json", s.series(s.curveJSON))
		r.Get("/v1/series/{id}/curve.csv", s.series(s.curveCSV))
		r.Get("/v1/series/{id}/events", s.series(s.seriesEvents))
		r.Post("/v1/series/{id}/live", s.series(s.postLive))
		r.Post("/v1/series/{id}/live/frames", s.idempotent("live-frame", s.series(s.postLiveFrame)))
		r.Post("/v1/series/{id}/live/frames/{n}/full", s.series(s.postLiveFull))
		r.Get("/v1/series/{id}/live/events", s.series(s.liveEvents))

		for _, p := range []struct {
			path string
			wrap func(jobHandler) http.HandlerFunc
		}{{analysisPath, s.analysis}, {framePath, s.frame}} {
			r.Get(p.path, p.wrap(s.getJob))
			r.Get(p.path+"/events", p.wrap(s.jobEvents))
			for _, name := range resultFiles {
				r.Get(p.path+"/"+name, p.wrap(s.resultFile(name)))
			}
			r.Get(p.path+"/arrays/{quantity}.npy", p.wrap(s.array))
			r.Get(p.path+"/map.png", p.wrap(s.mapPNG))
			r.Get(p.path+"/images/reference.png", p.wrap(s.image("reference")))
			r.Get(p.path+"/images/deformed.png", p.wrap(s.image("deformed")))
		}
	})
	return r
}

func (s *Server) healthz(w http.ResponseWriter, r *http.Request) {
	writeJSON(w, http.StatusOK, map[string]string{"status": "ok"})
}

func (s *Server) readyz(w http.ResponseWriter, r *http.Request) {
	if s.draining.Load() {
		writeProblem(w, r, problem(http.StatusServiceUnavailable, "draining", "Shutting down", "the server is shutting down and takes no new work"))
		return
	}
	if p := s.notReady(); p != nil {
		writeProblem(w, r, p)
		return
	}
	ctx, cancel := context.WithTimeout(r.Context(), 2*1e9)
	defer cancel()
	if _, err := s.store.Counts(ctx); err != nil {
		writeProblem(w, r, problem(http.StatusServiceUnavailable, "store-unavailable", "Store unavailable", err.Error()))
		return
	}
	writeJSON(w, http.StatusOK, map[string]any{"status": "ready", "queue": s.queue.Len(), "capacity": s.queue.Cap(), "workers": s.cfg.Workers})
}

func (s *Server) getMetrics(w http.ResponseWriter, r *http.Request) {
	w.Header().Set("Content-Type", "text/plain; version=0.0.4; charset=utf-8")
	if err := s.writeMetrics(r.Context(), w); err != nil {
		writeProblem(w, r, asProblem(err, ""))
	}
}

func (s *Server) openapi(w http.ResponseWriter, r *http.Request) {
	w.Header().Set("Content-Type", "application/json")
	w.Header().Set("Cache-Control", "no-cache")
	_, _ = w.Write(api.OpenAPI())
}

// writeJobField writes the job view v (its Field empty) with field, the
// stored field.json, as its "field" member, copied as it is: re-indenting
// the field (hundreds of kB for a few thousand points) through
// encoding/json took longer than the rest of the answer. field must be
// valid JSON, or nil for none.
func writeJobField(w http.ResponseWriter, status int, v *jobView, field []byte) {
	v.Field = nil
	b, err := json.MarshalIndent(v, "", "  ")
	if err != nil || len(field) == 0 {
		writeJSON(w, status, v)
		return
	}
	b = bytes.TrimRight(b, " \n")
	b = append(b[:len(b)-1], ",\n  \"field\": "...) // drop the closing brace
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(status)
	w.Write(b)
	w.Write(bytes.TrimSpace(field))
	w.Write([]byte("\n}\n"))
}

func writeJSON(w http.ResponseWriter, status int, v any) {
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(status)
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	_ = enc.Encode(v)
}

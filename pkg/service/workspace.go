package service

// The routes the browser workspace needs beyond running jobs: a name for
// every analysis and series (given at creation with ?name=, changed with
// PATCH), a small thumbnail for the list of earlier work, and the material
// properties and HTML report of a series.

import (
	"bytes"
	"encoding/json"
	"fmt"
	"image"
	"image/png"
	"io"
	"net/http"
	"strconv"
	"strings"
	"time"
	"unicode"

	"github.com/disintegration/imaging"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// maxNameLen caps a user-given name, in bytes.
const maxNameLen = 200

// thumbSize is the bounding box of a thumbnail, in pixels.
const thumbW, thumbH = 160, 120

// checkName validates a user-given name of an analysis or series.
func checkName(name string) error {
	if len(name) > maxNameLen {
		return fmt.Errorf("is %d bytes long; use at most %d", len(name), maxNameLen)
	}
	for _, c := range name {
		if unicode.IsControl(c) {
			return fmt.Errorf("holds the control character %U; use printable text", c)
		}
	}
	return nil
}

// nameQuery returns the optional ?name= of a POST, trimmed, or def.
func nameQuery(r *http.Request, def string) (string, *Problem) {
	name := strings.TrimSpace(r.URL.Query().Get("name"))
	if err := checkName(name); err != nil {
		return "", problem(http.StatusBadRequest, "bad-query", "Invalid query", "name "+err.Error(),
			FieldProblem{"name", "give a short label, e.g. name=Coupon A3 tension"})
	}
	if name == "" {
		name = def
	}
	return name, nil
}

// readRename reads the body of a PATCH: {"name": "..."}.
func readRename(w http.ResponseWriter, r *http.Request) (string, *Problem) {
	var body struct {
		Name *string `json:"name"`
	}
	dec := json.NewDecoder(http.MaxBytesReader(w, r.Body, 4096))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&body); err != nil || body.Name == nil {
		detail := "the body is not a JSON object with a name"
		if err != nil {
			detail += ": " + err.Error()
		}
		return "", problem(http.StatusBadRequest, "bad-body", "Invalid body", detail,
			FieldProblem{"name", `send {"name": "Coupon A3 tension"}`})
	}
	name := strings.TrimSpace(*body.Name)
	if err := checkName(name); err != nil {
		return "", problem(http.StatusBadRequest, "bad-body", "Invalid body", "name "+err.Error(),
			FieldProblem{"name", "give a short label of printable text"})
	}
	return name, nil
}

func (s *Server) renameAnalysis(w http.ResponseWriter, r *http.Request, j *jobs.Job) {
	name, p := readRename(w, r)
	if p != nil {
		writeProblem(w, r, p)
		return
	}
	j, err := s.store.UpdateJob(r.Context(), j.ID, func(j *jobs.Job) error { j.Name = name; return nil })
	if err != nil {
		writeProblem(w, r, asProblem(err, "id"))
		return
	}
	s.recordJob(r.Context(), jobs.AuditRename, j, "to "+strconv.Quote(name))
	writeJSON(w, http.StatusOK, viewJob(j))
}

func (s *Server) renameSeries(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	name, p := readRename(w, r)
	if p != nil {
		writeProblem(w, r, p)
		return
	}
	sr, err := s.store.UpdateSeries(r.Context(), sr.ID, func(sr *jobs.Series) error {
		sr.Name, sr.Updated = name, time.Now().UTC()
		return nil
	})
	if err != nil {
		writeProblem(w, r, asProblem(err, "id"))
		return
	}
	s.recordSeries(r.Context(), jobs.AuditRename, sr, "to "+strconv.Quote(name))
	writeJSON(w, http.StatusOK, s.viewSeries(r.Context(), sr, true))
}

// thumbQuantities are tried in order for the thumbnail of a finished
// analysis; without any, the thumbnail shows the reference image.
var thumbQuantities = []string{"E11", "u"}

func (s *Server) analysisThumb(w http.ResponseWriter, r *http.Request, j *jobs.Job) {
	ref, err := s.loadImage(r.Context(), jobs.InputKey(j.ID, "reference"))
	if err != nil {
		writeProblem(w, r, asProblem(err, "reference"))
		return
	}
	if j.State == jobs.Succeeded {
		open := func(name string) (io.ReadCloser, error) {
			return s.blobs.Get(r.Context(), jobs.ResultKey(j.ID, name))
		}
		for _, q := range thumbQuantities {
			b, err := s.cfg.Analyzer.Map(r.Context(), open, MapRequest{Quantity: q, On: "reference"}, ref)
			if err != nil {
				continue
			}
			if img, err := png.Decode(bytes.NewReader(b)); err == nil {
				writeThumb(w, r, img)
				return
			}
		}
	}
	s.grayThumb(w, r, ref)
}

func (s *Server) seriesThumb(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	ref, err := s.loadImage(r.Context(), jobs.SeriesKey(sr.ID, "reference"))
	if err != nil {
		writeProblem(w, r, asProblem(err, "reference"))
		return
	}
	s.grayThumb(w, r, ref)
}

// grayThumb answers the thumbnail of a grey image, its range stretched.
func (s *Server) grayThumb(w http.ResponseWriter, r *http.Request, g *imageio.Gray) {
	_, _, lo, hi := imageio.Stats(g)
	img, err := imageio.ToImage(stretched(g, lo, hi), 8)
	if err != nil {
		writeProblem(w, r, asProblem(err, "reference"))
		return
	}
	writeThumb(w, r, img)
}

// writeThumb answers img fitted into thumbW × thumbH as a PNG.
func writeThumb(w http.ResponseWriter, r *http.Request, img image.Image) {
	t := imaging.Fit(img, thumbW, thumbH, imaging.Box)
	var b bytes.Buffer
	if err := png.Encode(&b, t); err != nil {
		writeProblem(w, r, asProblem(fmt.Errorf("thumbnail: %w", err), ""))
		return
	}
	w.Header().Set("Content-Type", "image/png")
	w.Header().Set("Cache-Control", "private, max-age=60")
	_, _ = w.Write(b.Bytes())
}

// seriesProperties answers the material properties of a series curve
// (pkg/series: each with its fit range, fit quality and standard) and the
// cautions that go with them.
func (s *Server) seriesProperties(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	c, err := s.seriesCurve(r.Context(), sr)
	if err != nil {
		writeProblem(w, r, asProblem(err, ""))
		return
	}
	pr := c.Properties()
	lines := []map[string]string{}
	for _, l := range pr.Lines() {
		lines = append(lines, map[string]string{"property": l[0], "text": l[1]})
	}
	writeJSON(w, http.StatusOK, map[string]any{"series": sr.ID, "properties": pr, "lines": lines, "cautions": series.Cautions()})
}

// seriesReport answers the HTML report of a series (without plot images:
// the service keeps no files beside it).
func (s *Server) seriesReport(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	c, err := s.seriesCurve(r.Context(), sr)
	if err != nil {
		writeProblem(w, r, asProblem(err, ""))
		return
	}
	title := sr.Name
	if title == "" {
		title = "Series " + sr.ID
	}
	var b bytes.Buffer
	if err := series.WriteReport(&b, series.ReportInput{Title: title, Software: "mottle serve", Created: time.Now().UTC(), Curve: c}); err != nil {
		writeProblem(w, r, asProblem(err, ""))
		return
	}
	w.Header().Set("Content-Type", "text/html; charset=utf-8")
	if r.URL.Query().Get("download") == "true" {
		w.Header().Set("Content-Disposition", `attachment; filename="report.html"`)
	}
	_, _ = w.Write(b.Bytes())
}

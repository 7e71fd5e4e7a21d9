package service

import (
	"bytes"
	"context"
	"encoding/csv"
	"errors"
	"fmt"
	"net/http"
	"sort"
	"strconv"
	"strings"
	"time"

	"github.com/go-chi/chi/v5"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// seriesHandler serves a request about one series.
type seriesHandler func(w http.ResponseWriter, r *http.Request, sr *jobs.Series)

// series resolves {id} to a series.
func (s *Server) series(h seriesHandler) http.HandlerFunc {
	return func(w http.ResponseWriter, r *http.Request) {
		id := chi.URLParam(r, "id")
		if err := jobs.CheckID("series", id); err != nil {
			writeProblem(w, r, problem(http.StatusBadRequest, "bad-id", "Invalid id", err.Error(), FieldProblem{"id", "use the id returned by POST /v1/series"}))
			return
		}
		sr, err := s.store.Series(r.Context(), id)
		if err != nil {
			writeProblem(w, r, asProblem(err, "id"))
			return
		}
		h(w, r, sr)
	}
}

// seriesView is the JSON form of a series in responses.
type seriesView struct {
	*jobs.Series
	// FrameCount is len(Frames); States counts frames by state.
	FrameCount int                `json:"frame_count"`
	States     map[jobs.State]int `json:"states,omitempty"`
	Links      map[string]string  `json:"links"`
}

func (s *Server) viewSeries(ctx context.Context, sr *jobs.Series, counts bool) *seriesView {
	p := "/v1/series/" + sr.ID
	v := &seriesView{Series: sr, FrameCount: len(sr.Frames), Links: map[string]string{
		"self": p, "frames": p + "/frames", "events": p + "/events", "curve.csv": p + "/curve.csv", "curve.json": p + "/curve.json"}}
	if counts {
		if list, err := s.store.Jobs(ctx, jobs.Filter{Series: sr.ID}); err == nil {
			v.States = map[jobs.State]int{}
			for _, j := range list {
				v.States[j.State]++
			}
		}
	}
	return v
}

func (s *Server) postSeries(w http.ResponseWriter, r *http.Request) {
	u, err := s.readMultipart(w, r, []string{"reference"}, "mask")
	if err != nil {
		writeProblem(w, r, asProblem(err, "body"))
		return
	}
	ref := u.img["reference"]
	p, err := s.parseSeriesParams(u.params, ref.W, ref.H)
	if m := u.img["mask"]; err == nil && m != nil && (m.W != ref.W || m.H != ref.H) {
		err = &FieldError{Field: "mask", Detail: fmt.Sprintf("is %d×%d px but the reference is %d×%d px; the mask must match the reference", m.W, m.H, ref.W, ref.H)}
	}
	var params []byte
	if err == nil {
		params, err = flatSeriesParams(p)
	}
	if err != nil {
		writeProblem(w, r, asProblem(err, "params"))
		return
	}
	now := time.Now().UTC()
	sr := &jobs.Series{ID: jobs.NewID(), Params: params, Width: ref.W, Height: ref.H, HasMask: u.raw["mask"] != nil,
		Created: now, Updated: now, Frames: []string{}}
	for name, b := range u.raw {
		if err := s.blobs.Put(r.Context(), jobs.SeriesKey(sr.ID, name), bytes.NewReader(b)); err != nil {
			s.blobs.Delete(r.Context(), jobs.SeriesKey(sr.ID, ""))
			writeProblem(w, r, asProblem(err, name))
			return
		}
	}
	if err := s.store.CreateSeries(r.Context(), sr); err != nil {
		s.blobs.Delete(r.Context(), jobs.SeriesKey(sr.ID, ""))
		writeProblem(w, r, asProblem(err, ""))
		return
	}
	logger(r.Context()).Info("series created", "series", sr.ID, "width", sr.Width, "height", sr.Height)
	w.Header().Set("Location", "/v1/series/"+sr.ID)
	writeJSON(w, http.StatusCreated, s.viewSeries(r.Context(), sr, false))
}

func (s *Server) listSeries(w http.ResponseWriter, r *http.Request) {
	all, err := s.store.AllSeries(r.Context())
	if err != nil {
		writeProblem(w, r, asProblem(err, ""))
		return
	}
	out := []*seriesView{}
	for i := len(all) - 1; i >= 0; i-- {
		out = append(out, s.viewSeries(r.Context(), all[i], false))
	}
	writeJSON(w, http.StatusOK, map[string]any{"series": out})
}

func (s *Server) getSeries(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	writeJSON(w, http.StatusOK, s.viewSeries(r.Context(), sr, true))
}

func (s *Server) deleteSeriesH(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	if _, err := s.deleteSeries(r.Context(), sr.ID, false); err != nil {
		writeProblem(w, r, asProblem(err, "id"))
		return
	}
	w.WriteHeader(http.StatusNoContent)
}

var errNotLast = errors.New("frame is not the last one")

// postFrame appends a frame sent as the raw body.
func (s *Server) postFrame(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	if s.queueFull(w, r) {
		return
	}
	var opts struct {
		time, load *float64
		wait       bool
	}
	var err error
	if opts.time, err = floatQuery(r, "time"); err == nil {
		if opts.load, err = floatQuery(r, "load"); err == nil {
			opts.wait, err = boolQuery(r, "wait", true)
		}
	}
	if err != nil {
		writeProblem(w, r, err.(*Problem))
		return
	}
	body, g, err := s.readRawImage(w, r, "the frame")
	if err != nil {
		writeProblem(w, r, asProblem(err, "body"))
		return
	}
	if g.W != sr.Width || g.H != sr.Height {
		writeProblem(w, r, problem(http.StatusUnprocessableEntity, "unusable-images", "Images cannot be correlated",
			fmt.Sprintf("the frame is %d×%d px but the series reference is %d×%d px", g.W, g.H, sr.Width, sr.Height),
			FieldProblem{"body", "send frames from the same camera at the same resolution and crop as the reference"}))
		return
	}
	j := &jobs.Job{ID: jobs.NewID(), Kind: jobs.Frame, State: jobs.Queued, Params: sr.Params, Width: g.W, Height: g.H,
		HasMask: sr.HasMask, Series: sr.ID, Time: opts.time, Load: opts.load, Created: time.Now().UTC()}
	ctx := r.Context()
	// Reserve the next frame index; give it back if the job is not accepted.
	_, err = s.store.UpdateSeries(ctx, sr.ID, func(sr *jobs.Series) error {
		j.FrameIndex = len(sr.Frames)
		sr.Frames = append(sr.Frames, j.ID)
		sr.Updated = j.Created
		return nil
	})
	if err != nil {
		writeProblem(w, r, asProblem(err, "id"))
		return
	}
	if err := s.accept(ctx, j, map[string][]byte{"deformed": body}); err != nil {
		s.releaseFrame(sr.ID, j)
		s.answerAcceptErr(w, r, err)
		return
	}
	logger(ctx).Info("frame accepted", "series", sr.ID, "frame", j.FrameIndex, "job", j.ID)
	s.answerJob(w, r, j, opts.wait)
}

// releaseFrame gives back a reserved frame index after the job was not
// accepted. If later frames were appended meanwhile, the index stays, and
// its record says it was rejected.
func (s *Server) releaseFrame(seriesID string, j *jobs.Job) {
	ctx := context.Background()
	_, err := s.store.UpdateSeries(ctx, seriesID, func(sr *jobs.Series) error {
		if n := len(sr.Frames); n == 0 || sr.Frames[n-1] != j.ID {
			return errNotLast
		}
		sr.Frames = sr.Frames[:len(sr.Frames)-1]
		return nil
	})
	if errors.Is(err, errNotLast) {
		now := time.Now().UTC()
		j.State, j.Finished = jobs.Failed, &now
		j.Error = &jobs.Failure{Title: "Rejected", Detail: "the queue was full when this frame arrived; it was not analysed, send it again"}
		_ = s.store.CreateJob(ctx, j)
	}
}

func (s *Server) listFrames(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	list, err := s.frames(r.Context(), sr)
	if err != nil {
		writeProblem(w, r, asProblem(err, ""))
		return
	}
	out := make([]*jobView, len(list))
	for i, j := range list {
		out[i] = viewJob(j)
	}
	writeJSON(w, http.StatusOK, map[string]any{"frames": out})
}

// frames returns the frame jobs of sr in frame order.
func (s *Server) frames(ctx context.Context, sr *jobs.Series) ([]*jobs.Job, error) {
	list, err := s.store.Jobs(ctx, jobs.Filter{Series: sr.ID})
	if err != nil {
		return nil, err
	}
	sort.Slice(list, func(a, b int) bool { return list[a].FrameIndex < list[b].FrameIndex })
	return list, nil
}

// curveRow is one frame of a series curve.
type curveRow struct {
	Frame         int        `json:"frame"`
	Time          *float64   `json:"time"`
	Load          *float64   `json:"load"`
	State         jobs.State `json:"state"`
	ValidFraction *float64   `json:"valid_fraction"`
	// Mode is how the series engine correlated the frame (direct or
	// incremental), when it did.
	Mode   string             `json:"mode,omitempty"`
	Mean   map[string]float64 `json:"mean,omitempty"`
	Gauges map[string]float64 `json:"gauges,omitempty"`
}

func (s *Server) curve(ctx context.Context, sr *jobs.Series) ([]curveRow, []string, []string, error) {
	list, err := s.frames(ctx, sr)
	if err != nil {
		return nil, nil, nil, err
	}
	rows := make([]curveRow, 0, len(list))
	means, gauges := map[string]bool{}, map[string]bool{}
	for _, j := range list {
		row := curveRow{Frame: j.FrameIndex, Time: j.Time, Load: j.Load, State: j.State}
		if sm := j.Summary; sm != nil {
			vf := sm.ValidFraction
			row.ValidFraction, row.Mode, row.Mean, row.Gauges = &vf, sm.Mode, sm.Mean, sm.Gauges
			for k := range sm.Mean {
				means[k] = true
			}
			for k := range sm.Gauges {
				gauges[k] = true
			}
		}
		rows = append(rows, row)
	}
	return rows, sortedKeys(means), sortedKeys(gauges), nil
}

func sortedKeys(m map[string]bool) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}

func (s *Server) curveJSON(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	rows, _, _, err := s.curve(r.Context(), sr)
	if err != nil {
		writeProblem(w, r, asProblem(err, ""))
		return
	}
	writeJSON(w, http.StatusOK, map[string]any{"series": sr.ID, "frames": rows})
}

func (s *Server) curveCSV(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	rows, means, gauges, err := s.curve(r.Context(), sr)
	if err != nil {
		writeProblem(w, r, asProblem(err, ""))
		return
	}
	w.Header().Set("Content-Type", "text/csv; charset=utf-8")
	w.Header().Set("Content-Disposition", `attachment; filename="curve.csv"`)
	cw := csv.NewWriter(w)
	modes := false
	for _, row := range rows {
		modes = modes || row.Mode != ""
	}
	head := []string{"frame", "time", "load", "state", "valid_fraction"}
	if modes {
		head = append(head, "mode")
	}
	for _, k := range means {
		head = append(head, "mean_"+k)
	}
	for _, k := range gauges {
		// The series engine names its readings like the columns of its
		// own curve (gauge_<name>_<component>_mean, ext_<name>_eng).
		if !strings.HasPrefix(k, "gauge_") && !strings.HasPrefix(k, "ext_") {
			k = "gauge_" + k
		}
		head = append(head, k)
	}
	_ = cw.Write(head)
	num := func(p *float64) string {
		if p == nil {
			return ""
		}
		return strconv.FormatFloat(*p, 'g', -1, 64)
	}
	for _, row := range rows {
		rec := []string{strconv.Itoa(row.Frame), num(row.Time), num(row.Load), string(row.State), num(row.ValidFraction)}
		if modes {
			rec = append(rec, row.Mode)
		}
		for _, k := range means {
			if v, ok := row.Mean[k]; ok {
				rec = append(rec, num(&v))
			} else {
				rec = append(rec, "")
			}
		}
		for _, k := range gauges {
			if v, ok := row.Gauges[k]; ok {
				rec = append(rec, num(&v))
			} else {
				rec = append(rec, "")
			}
		}
		_ = cw.Write(rec)
	}
	cw.Flush()
}

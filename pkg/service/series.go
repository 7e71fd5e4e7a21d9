package service

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"net/http"
	"slices"
	"sort"
	"strconv"
	"strings"
	"time"

	"github.com/go-chi/chi/v5"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
	"github.com/mottledic/mottle/pkg/series"
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
		if !s.allowed(w, r, sr.Project, sr.Owner) {
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
	// Live is true while the series has a live session in this server
	// (its live/events stream then delivers each live frame's values).
	Live bool `json:"live,omitempty"`
}

func (s *Server) viewSeries(ctx context.Context, sr *jobs.Series, counts bool) *seriesView {
	p := "/v1/series/" + sr.ID
	v := &seriesView{Series: sr, FrameCount: len(sr.Frames), Links: map[string]string{
		"self": p, "frames": p + "/frames", "events": p + "/events", "curve.csv": p + "/curve.csv", "curve.json": p + "/curve.json",
		"thumb": p + "/thumb.png", "properties": p + "/properties.json", "report": p + "/report.html"}}
	if s.liveSession(sr.ID) != nil {
		v.Live = true
		v.Links["live_frames"], v.Links["live_events"] = p+"/live/frames", p+"/live/events"
	}
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
	raw, err := withCalibration(u.params, u)
	if err != nil {
		writeProblem(w, r, asProblem(err, "calibration"))
		return
	}
	p, err := s.parseSeriesParams(raw, ref.W, ref.H)
	if m := u.img["mask"]; err == nil && m != nil && (m.W != ref.W || m.H != ref.H) {
		err = &FieldError{Field: "mask", Detail: fmt.Sprintf("is %d×%d px but the reference is %d×%d px; the mask must match the reference", m.W, m.H, ref.W, ref.H)}
	}
	var params []byte
	if err == nil {
		params, err = flatSeriesParams(p)
	}
	var formats results.Set
	if err == nil {
		q := r.URL.Query().Get("formats")
		if strings.TrimSpace(q) == "" {
			q = SeriesDefaultFormats
		}
		formats, err = ParseFormats(q)
	}
	if err != nil {
		writeProblem(w, r, asProblem(err, "params"))
		return
	}
	refName := frameName(u.files["reference"], "reference")
	label, perr := nameQuery(r, refName)
	if perr != nil {
		writeProblem(w, r, perr)
		return
	}
	now := time.Now().UTC()
	proj, _ := chosenProject(r, caller(r.Context())) // checked by authenticate
	sr := &jobs.Series{ID: newID(r), Name: label, Project: proj, Owner: caller(r.Context()).Name, Params: params, Width: ref.W, Height: ref.H, HasMask: u.raw["mask"] != nil,
		ReferenceName: refName, Formats: formats.String(), Created: now, Updated: now, Frames: []string{},
		MaxInFlight: s.cfg.MaxFramesInFlight}
	for name, b := range u.raw {
		if err := s.blobs.Put(r.Context(), jobs.SeriesKey(sr.ID, name), bytes.NewReader(b)); err != nil {
			s.blobs.Delete(r.Context(), jobs.SeriesKey(sr.ID, ""))
			writeProblem(w, r, asProblem(err, name))
			return
		}
	}
	if err := s.store.CreateSeries(r.Context(), sr); errors.Is(err, jobs.ErrExists) {
		// A repeat under an Idempotency-Key that another instance
		// created meanwhile: answer with that series.
		if sr, err = s.store.Series(r.Context(), sr.ID); err != nil {
			writeProblem(w, r, asProblem(err, ""))
			return
		}
	} else if err != nil {
		s.blobs.Delete(r.Context(), jobs.SeriesKey(sr.ID, ""))
		writeProblem(w, r, asProblem(err, ""))
		return
	} else {
		s.recordSeries(r.Context(), jobs.AuditCreate, sr, "")
	}
	created(r)
	logger(r.Context()).Info("series created", "series", sr.ID, "width", sr.Width, "height", sr.Height)
	w.Header().Set("Location", "/v1/series/"+sr.ID)
	writeJSON(w, http.StatusCreated, s.viewSeries(r.Context(), sr, false))
}

func (s *Server) listSeries(w http.ResponseWriter, r *http.Request) {
	// kind: 2D series by default (the preview's workspace and existing
	// clients), stereo series with kind=stereo, as GET /v1/analyses.
	var kind jobs.Kind
	switch k := r.URL.Query().Get("kind"); k {
	case "", "series":
	case string(jobs.Stereo):
		kind = jobs.Stereo
	default:
		writeProblem(w, r, problem(http.StatusBadRequest, "bad-query", "Invalid query", "kind "+strconv.Quote(k)+" is unknown",
			FieldProblem{"kind", "use series (2D, the default) or stereo"}))
		return
	}
	all, err := s.store.AllSeries(r.Context())
	if err != nil {
		writeProblem(w, r, asProblem(err, ""))
		return
	}
	out := []*seriesView{}
	for i := len(all) - 1; i >= 0; i-- {
		if !readable(r, all[i].Project) || all[i].Kind != kind {
			continue
		}
		out = append(out, s.viewSeries(r.Context(), all[i], false))
	}
	writeJSON(w, http.StatusOK, map[string]any{"series": out})
}

func (s *Server) getSeries(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	writeJSON(w, http.StatusOK, s.viewSeries(r.Context(), sr, true))
}

func (s *Server) deleteSeriesH(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	n, err := s.deleteSeries(r.Context(), sr.ID, false)
	if err != nil {
		writeProblem(w, r, asProblem(err, "id"))
		return
	}
	s.recordSeries(r.Context(), jobs.AuditDelete, sr, fmt.Sprintf("with %d frame jobs", n))
	s.lives.Delete(sr.ID)
	w.WriteHeader(http.StatusNoContent)
}

var errNotLast = errors.New("frame is not the last one")

// errReserve wraps a failure to reserve a frame index in queueFrame.
var errReserve = errors.New("reserving the frame index")

// queueFrame reserves the next frame index of sr for a new frame job with
// id (newID of the request), stores the job and enqueues it. With index
// not nil the frame must get that index, else errIndex (and next, the
// index that comes next). inputs are the frame's images by input name
// ("deformed"; a stereo frame also "right_deformed"). A job of that id already among the frames (a
// repeat under an Idempotency-Key whose first request died after
// reserving) keeps its index; one already stored is returned as it is.
func (s *Server) queueFrame(ctx context.Context, sr *jobs.Series, id string, index *int, inputs map[string][]byte, name string, tm, load *float64) (j *jobs.Job, next int, err error) {
	j = &jobs.Job{ID: id, Kind: jobs.Frame, State: jobs.Queued, Project: sr.Project, Owner: caller(ctx).Name, Params: sr.Params, Width: sr.Width, Height: sr.Height,
		HasMask: sr.HasMask, Series: sr.ID, Time: tm, Load: load, Name: name, Formats: sr.Formats, Created: time.Now().UTC()}
	// Reserve the next frame index; give it back if the job is not accepted.
	_, err = s.store.UpdateSeries(ctx, sr.ID, func(sr *jobs.Series) error {
		if i := slices.Index(sr.Frames, j.ID); i >= 0 {
			j.FrameIndex = i
			return nil
		}
		next = len(sr.Frames)
		if index != nil && *index != next {
			return errIndex
		}
		j.FrameIndex = len(sr.Frames)
		sr.Frames = append(sr.Frames, j.ID)
		sr.Updated = j.Created
		return nil
	})
	if errors.Is(err, errIndex) {
		return nil, next, err
	}
	if err != nil {
		return nil, 0, fmt.Errorf("%w: %w", errReserve, err)
	}
	if err := s.accept(ctx, j, inputs); errors.Is(err, jobs.ErrExists) {
		j, err = s.store.Job(ctx, j.ID)
		return j, 0, err
	} else if err != nil {
		s.releaseFrame(sr.ID, j)
		return nil, 0, err
	}
	s.recordJob(ctx, jobs.AuditCreate, j, "")
	return j, 0, nil
}

// postFrame appends a frame sent as the raw body.
func (s *Server) postFrame(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	if s.queueFull(w, r) {
		return
	}
	var opts struct {
		time, load *float64
		wait       bool
	}
	name := r.URL.Query().Get("name")
	if len(name) > 200 || strings.ContainsAny(name, "\r\n\x00/\\") {
		writeProblem(w, r, problem(http.StatusBadRequest, "bad-query", "Invalid query", "name is too long or holds a line break, NUL or slash",
			FieldProblem{"name", "give the frame's file name, e.g. name=frame_012.tif"}))
		return
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
	index, err := intQuery(r, "index")
	if err != nil {
		writeProblem(w, r, err.(*Problem))
		return
	}
	inputs, fname, err := s.readFrame(w, r, sr)
	if err != nil {
		writeProblem(w, r, asProblem(err, "body"))
		return
	}
	if name == "" {
		name = fname
	}
	ctx := r.Context()
	if index != nil && *index < len(sr.Frames) {
		s.storedFrame(w, r, sr, *index, inputs, opts.wait)
		return
	}
	if p := s.checkFrameTime(ctx, sr, opts.time); p != nil {
		writeProblem(w, r, p)
		return
	}
	j, next, err := s.queueFrame(ctx, sr, newID(r), index, inputs, name, opts.time, opts.load)
	switch {
	case errors.Is(err, errIndex) && *index < next: // another request stored it meanwhile
		s.storedFrame(w, r, sr, *index, inputs, opts.wait)
		return
	case errors.Is(err, errIndex):
		writeProblem(w, r, indexProblem(*index, next))
		return
	case errors.Is(err, errReserve):
		writeProblem(w, r, asProblem(err, "id"))
		return
	case err != nil:
		s.answerAcceptErr(w, r, err)
		return
	}
	created(r)
	logger(ctx).Info("frame accepted", "series", sr.ID, "frame", j.FrameIndex, "job", j.ID)
	s.answerJob(w, r, j, opts.wait)
}

// readFrame reads the images of a frame of sr: the raw body of a 2D
// series, or the left and right parts of a stereo series. It returns them
// by input name and the file name the frame came with, if any.
func (s *Server) readFrame(w http.ResponseWriter, r *http.Request, sr *jobs.Series) (map[string][]byte, string, error) {
	if sr.Kind == jobs.Stereo {
		return s.readStereoFrame(w, r, sr)
	}
	body, fw, fh, err := s.readFrameBody(w, r)
	if err != nil {
		return nil, "", err
	}
	if fw != sr.Width || fh != sr.Height {
		return nil, "", problem(http.StatusUnprocessableEntity, "unusable-images", "Images cannot be correlated",
			fmt.Sprintf("the frame is %d×%d px but the series reference is %d×%d px", fw, fh, sr.Width, sr.Height),
			FieldProblem{"body", "send frames from the same camera at the same resolution and crop as the reference"})
	}
	return map[string][]byte{"deformed": body}, "", nil
}

// readFrameBody reads the raw body of a frame of a 2D series and returns
// it with the frame's size. A PNG frame is checked without decoding its
// pixels (imageio.CheckPNG: every chunk and its CRC, the header's size and
// bit depth), a small part of the API's CPU per frame of a decode; the
// worker decodes it, and reports the rare file whose chunks are intact but
// whose compressed data is not (a faulty encoder's) as the frame's
// failure. Other formats are decoded as any upload.
func (s *Server) readFrameBody(w http.ResponseWriter, r *http.Request) (body []byte, fw, fh int, err error) {
	if body, err = s.readRawBody(w, r, "the frame"); err != nil {
		return nil, 0, 0, err
	}
	if imageio.IsPNG(body) {
		h, err := imageio.CheckPNG(body, s.limits())
		if err != nil {
			p := asProblem(err, "body")
			p.Detail = "body: " + p.Detail
			return nil, 0, 0, p
		}
		return body, h.W, h.H, nil
	}
	if err := s.admitDecode(r, map[string][]byte{"body": body}); err != nil {
		return nil, 0, 0, s.memoryErr(w, err)
	}
	g, err := s.decode("body", body)
	if err != nil {
		return nil, 0, 0, err
	}
	return body, g.W, g.H, nil
}

var errIndex = errors.New("frame index out of order")

func indexProblem(index, next int) *Problem {
	return problem(http.StatusConflict, "frame-index", "Frame index out of order",
		fmt.Sprintf("index=%d does not come next: the series holds %d frames, so the next index is %d", index, next, next),
		FieldProblem{"index", fmt.Sprintf("send frame %d next (index=%d), or leave index out", next, next)})
}

// storedFrame answers a frame sent with ?index= of a frame already stored:
// with that frame if the image is the same (a repeat), else 409.
func (s *Server) storedFrame(w http.ResponseWriter, r *http.Request, sr *jobs.Series, index int, inputs map[string][]byte, wait bool) {
	ctx := r.Context()
	cur, err := s.store.Series(ctx, sr.ID)
	if err != nil {
		writeProblem(w, r, asProblem(err, "id"))
		return
	}
	if index >= len(cur.Frames) {
		writeProblem(w, r, indexProblem(index, len(cur.Frames)))
		return
	}
	j, err := s.store.Job(ctx, cur.Frames[index])
	same := true
	for name, body := range inputs {
		var stored []byte
		if err == nil {
			stored, err = s.readBlob(ctx, jobs.InputKey(j.ID, name))
		}
		same = same && bytes.Equal(stored, body)
	}
	if err != nil {
		// Reserved but not (yet) stored: not a frame to answer with.
		writeProblem(w, r, indexProblem(index, len(cur.Frames)))
		return
	}
	if !same {
		p := indexProblem(index, len(cur.Frames))
		p.Detail = fmt.Sprintf("frame %d is stored already with another image; the next index is %d", index, len(cur.Frames))
		writeProblem(w, r, p)
		return
	}
	s.answerJob(w, r, j, wait)
}

// checkFrameTime refuses, before anything is stored, a frame time that is
// not after the time of the series' last frame still counted (not failed
// or canceled): the series engine would fail the frame, and the refusal
// would stay in the curve as a failed row.
func (s *Server) checkFrameTime(ctx context.Context, sr *jobs.Series, t *float64) *Problem {
	if t == nil {
		return nil
	}
	for i := len(sr.Frames) - 1; i >= 0; i-- {
		j, err := s.store.Job(ctx, sr.Frames[i])
		if err != nil || j.State == jobs.Failed || j.State == jobs.Canceled {
			continue
		}
		if j.Time == nil || *t > *j.Time {
			return nil
		}
		return problem(http.StatusUnprocessableEntity, "frame-time", "Time stamps must increase",
			fmt.Sprintf("time %g s is not after frame %d's %g s; nothing was stored. If this repeats a frame whose answer was lost, "+
				"send it with the same Idempotency-Key or with ?index=%d to get the stored frame", *t, j.FrameIndex, *j.Time, j.FrameIndex),
			FieldProblem{"time", "send the frame's own time, later than the previous frame's"})
	}
	return nil
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

// frameName returns the base name of an uploaded file name, or def.
func frameName(file, def string) string {
	if i := strings.LastIndexAny(file, "/\\"); i >= 0 {
		file = file[i+1:]
	}
	if file == "" {
		return def
	}
	return file
}

// seriesCurve returns the curve of a series in the one curve format of
// pkg/series: the series engine's own rows from the tracker state after
// the last frame that succeeded, or, for an analyzer without a series
// engine, rows made from the frames' summaries.
func (s *Server) seriesCurve(ctx context.Context, sr *jobs.Series) (series.Curve, error) {
	if sr.Kind == jobs.Stereo {
		c, _, err := s.stereoSeriesCurve(ctx, sr)
		return c, err
	}
	p, err := decodeSeriesParams(sr.Params)
	if err != nil {
		return series.Curve{}, err
	}
	list, err := s.frames(ctx, sr)
	if err != nil {
		return series.Curve{}, err
	}
	for i := len(list) - 1; i >= 0; i-- {
		j := list[i]
		if j.State != jobs.Succeeded {
			continue
		}
		b, err := s.run.ReadState(ctx, sr.ID, j.FrameIndex)
		if err != nil {
			break
		}
		c, err := series.CurveOfState(b)
		if err != nil {
			return series.Curve{}, fmt.Errorf("stored series state: %w", err)
		}
		return s.withLive(sr, c), nil
	}
	ref := sr.ReferenceName
	if ref == "" {
		ref = "reference"
	}
	c := series.Curve{Params: p, Rows: []series.Summary{series.ReferenceRow(ref, p)}}
	for _, j := range list {
		sm := j.Summary
		if j.State != jobs.Succeeded || sm == nil {
			continue
		}
		row := series.Summary{Index: j.FrameIndex + 1, Name: j.Name, Time: j.Time, Load: j.Load, Mode: sm.Mode,
			ValidFraction: sm.ValidFraction, Mean: map[string]float64{}}
		if row.Name == "" {
			row.Name = fmt.Sprintf("frame_%d", j.FrameIndex)
		}
		if row.Mode == "" {
			row.Mode = series.ModeDirect
		}
		if sm.MeanZNCC != nil {
			row.MeanZNCC = *sm.MeanZNCC
		}
		if sm.Tracked != nil {
			row.Tracked = *sm.Tracked
		}
		for _, q := range series.MeanNames {
			if v, ok := sm.Mean[q]; ok {
				row.Mean[q] = v
			}
		}
		c.Rows = append(c.Rows, row)
	}
	return s.withLive(sr, c), nil
}

// withLive merges the series' live session, if any, into its curve.
func (s *Server) withLive(sr *jobs.Series, c series.Curve) series.Curve {
	if ls := s.liveSession(sr.ID); ls != nil {
		return liveCurve(c, ls)
	}
	return c
}

func (s *Server) curveCSV(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	c, err := s.seriesCurve(r.Context(), sr)
	if err != nil {
		writeProblem(w, r, asProblem(err, ""))
		return
	}
	var b bytes.Buffer
	if err := c.WriteCSV(&b); err != nil {
		writeProblem(w, r, asProblem(err, ""))
		return
	}
	w.Header().Set("Content-Type", "text/csv; charset=utf-8")
	w.Header().Set("Content-Disposition", `attachment; filename="curve.csv"`)
	_, _ = w.Write(b.Bytes())
}

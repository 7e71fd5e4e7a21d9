package service

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"strconv"
	"strings"
	"sync"
	"time"

	"github.com/go-chi/chi/v5"

	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// liveSession is the live mode of one series: the live engine, the values
// of every frame so far (for late subscribers), the frame jobs of the
// frames that got a full field, and the event subscribers.
//
// It lives in the process that started it. The live engine's state (the
// last solution of every live point, the readings' last trusted values)
// changes with every frame, and writing it out per frame would cost more
// than the frame's answer is allowed to take, so it is not persisted.
// What is persisted, when the session starts, is a mark (liveMark at
// series/{id}/live.json) naming the process. A restarted service, or
// another instance of a cluster, finds the mark without the session and
// refuses the series' live routes with a 409 problem document of type
// live-ended, instead of silently starting a second live session whose
// frame numbers would clash with the first. The frame jobs queued for the
// full field, their results and their curve rows stay; the values of live
// frames without a full field are lost with the process.
type liveSession struct {
	mu     sync.Mutex // one live frame at a time, in order
	live   *series.Live
	values []series.LiveValues
	// job[i] is the FrameIndex of live frame i's job (full field), or -1.
	job       []int
	lastQueue int // last live index queued for the full field
	frames    map[int]liveFrame
	subs      map[chan series.LiveValues]bool
	// answers holds the answer of each frame sent with an
	// Idempotency-Key, by the resource id chosen under the key, for
	// repeats of the request.
	answers map[string]liveAnswer
}

// liveMark is the persisted record of a live session: which server
// process started it, when, and with which options.
type liveMark struct {
	Instance string             `json:"instance"`
	Started  time.Time          `json:"started"`
	Options  series.LiveOptions `json:"options"`
}

// liveMarkKey is the blob key of a series' liveMark.
func liveMarkKey(id string) string { return jobs.SeriesKey(id, "live.json") }

// liveEnded returns the problem of a series whose live session was started
// by another process (this one restarted since, or another instance holds
// it), or nil if the series has no live mark.
func (s *Server) liveEnded(ctx context.Context, id string) *Problem {
	b, err := s.run.ReadBlob(ctx, liveMarkKey(id))
	if err != nil {
		return nil
	}
	var m liveMark
	_ = json.Unmarshal(b, &m)
	p := problem(http.StatusConflict, "live-ended", "Live session ended",
		fmt.Sprintf("the live session of this series was started at %s by another service process (instance %q; this one is %q): "+
			"the service restarted since, or another instance holds it. Live sessions are kept in memory and do not survive a restart; "+
			"the full-field frame jobs and their curve rows stay, the live values of other frames are lost",
			m.Started.Format(time.RFC3339), m.Instance, s.instance),
		FieldProblem{"id", "create a new series with the same reference (POST /v1/series) and start its live mode, or send further frames to /v1/series/{id}/frames"})
	return p
}

// liveFrame is a frame kept for a full field on request.
type liveFrame struct {
	body []byte
	name string
	t, l *float64
}

// liveBacklog is how many values an event subscriber may fall behind
// before its stream is ended (it can reconnect with ?after=).
const liveBacklog = 1024

// onRequestKeep is how many recent frames a series with the full field on
// request keeps in memory.
const onRequestKeep = 64

func (s *Server) liveSession(id string) *liveSession {
	v, ok := s.lives.Load(id)
	if !ok {
		return nil
	}
	return v.(*liveSession)
}

// startLive makes the live session of sr with options lo.
func (s *Server) startLive(ctx context.Context, sr *jobs.Series, lo series.LiveOptions) (*liveSession, error) {
	if p := s.liveEnded(ctx, sr.ID); p != nil {
		return nil, p
	}
	p, err := decodeSeriesParams(sr.Params)
	if err != nil {
		return nil, err
	}
	ref, err := s.loadImage(ctx, jobs.SeriesKey(sr.ID, "reference"))
	if err != nil {
		return nil, err
	}
	var opt series.Options
	if sr.HasMask {
		if opt.Mask, err = s.loadImage(ctx, jobs.SeriesKey(sr.ID, "mask")); err != nil {
			return nil, err
		}
	}
	name := sr.ReferenceName
	l, err := series.NewLive(ref, series.FrameMeta{Name: name}, p, opt, lo)
	if err != nil {
		return nil, &FieldError{Field: "live", Detail: err.Error()}
	}
	ls := &liveSession{live: l, job: []int{-1}, frames: map[int]liveFrame{}, subs: map[chan series.LiveValues]bool{},
		answers: map[string]liveAnswer{}}
	if old, loaded := s.lives.LoadOrStore(sr.ID, ls); loaded {
		return old.(*liveSession), nil
	}
	mark, _ := json.Marshal(liveMark{Instance: s.instance, Started: time.Now().UTC(), Options: l.Options()})
	if err := s.blobs.Put(ctx, liveMarkKey(sr.ID), bytes.NewReader(mark)); err != nil {
		s.lives.Delete(sr.ID)
		return nil, fmt.Errorf("live session of series %s: store its mark: %w", sr.ID, err)
	}
	return ls, nil
}

// liveOrEnded returns the live session of sr, or writes the problem of a
// series without one (live-ended after a restart, else not-live) and
// returns nil.
func (s *Server) liveOrEnded(w http.ResponseWriter, r *http.Request, sr *jobs.Series, notLive string) *liveSession {
	if ls := s.liveSession(sr.ID); ls != nil {
		return ls
	}
	if p := s.liveEnded(r.Context(), sr.ID); p != nil {
		writeProblem(w, r, p)
		return nil
	}
	writeProblem(w, r, problem(http.StatusNotFound, "not-live", "Not live", notLive))
	return nil
}

// postLive starts the live mode of a series with the options in the JSON
// body (series.LiveOptions; empty = defaults). A series already live
// keeps its session: 409.
func (s *Server) postLive(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	if sr.Kind == jobs.Stereo {
		writeProblem(w, r, problem(http.StatusConflict, "live-stereo", "No live mode for stereo series",
			"live mode tracks frames of one camera; a stereo series takes its pairs at /v1/series/"+sr.ID+"/frames (a left and a right part each)",
			FieldProblem{"id", "use a 2D series for live mode, or post the pairs as frames"}))
		return
	}
	if s.liveSession(sr.ID) != nil {
		writeProblem(w, r, problem(http.StatusConflict, "live-started", "Live mode already started",
			"the series is already live; send frames to its live/frames route"))
		return
	}
	if p := s.liveEnded(r.Context(), sr.ID); p != nil {
		writeProblem(w, r, p)
		return
	}
	var lo series.LiveOptions
	b, err := io.ReadAll(http.MaxBytesReader(w, r.Body, 1<<16))
	if err == nil && len(bytes.TrimSpace(b)) > 0 {
		dec := json.NewDecoder(bytes.NewReader(b))
		dec.DisallowUnknownFields()
		err = dec.Decode(&lo)
	}
	if err == nil {
		err = lo.Validate()
	}
	if err != nil {
		writeProblem(w, r, problem(http.StatusBadRequest, "invalid-live-options", "Invalid live options", err.Error(),
			FieldProblem{"body", `give JSON such as {"full": "every_n", "every_n": 10, "max_jump": 0.02}`}))
		return
	}
	ls, err := s.startLive(r.Context(), sr, lo)
	if err != nil {
		writeProblem(w, r, asProblem(err, "live"))
		return
	}
	writeJSON(w, http.StatusCreated, map[string]any{"series": sr.ID, "options": ls.live.Options(),
		"links": map[string]string{"frames": "/v1/series/" + sr.ID + "/live/frames", "events": "/v1/series/" + sr.ID + "/live/events"}})
}

// liveAnswer is the answer to a live frame: its values and where the time
// went.
type liveAnswer struct {
	series.LiveValues
	// FullFieldJob is the id of the frame job that computes the frame's
	// full field, when it is due.
	FullFieldJob string `json:"full_field_job,omitempty"`
	// DecodeMS is the time to decode the upload; LiveMS the live
	// correlation and readings.
	DecodeMS float64 `json:"decode_ms"`
	LiveMS   float64 `json:"live_ms"`
}

// postLiveFrame takes the next frame of a live series (the raw image body,
// query name, time, load) and answers with its live values. A frame due
// for the full field is also appended as a normal frame job.
func (s *Server) postLiveFrame(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	name := r.URL.Query().Get("name")
	if len(name) > 200 || strings.ContainsAny(name, "\r\n\x00/\\") {
		writeProblem(w, r, problem(http.StatusBadRequest, "bad-query", "Invalid query", "name is too long or holds a line break, NUL or slash",
			FieldProblem{"name", "give the frame's file name, e.g. name=frame_012.tif"}))
		return
	}
	tm, err := floatQuery(r, "time")
	var load *float64
	if err == nil {
		load, err = floatQuery(r, "load")
	}
	if err != nil {
		writeProblem(w, r, err.(*Problem))
		return
	}
	t0 := time.Now()
	body, g, err := s.readRawImage(w, r, "the frame")
	if err != nil {
		writeProblem(w, r, asProblem(err, "body"))
		return
	}
	decode := time.Since(t0)
	if g.W != sr.Width || g.H != sr.Height {
		writeProblem(w, r, problem(http.StatusUnprocessableEntity, "unusable-images", "Images cannot be correlated",
			fmt.Sprintf("the frame is %d×%d px but the series reference is %d×%d px", g.W, g.H, sr.Width, sr.Height),
			FieldProblem{"body", "send frames from the same camera at the same resolution and crop as the reference"}))
		return
	}
	ls := s.liveSession(sr.ID)
	if ls == nil {
		if ls, err = s.startLive(r.Context(), sr, series.LiveOptions{}); err != nil {
			writeProblem(w, r, asProblem(err, "live"))
			return
		}
	}
	ls.mu.Lock()
	defer ls.mu.Unlock()
	t1 := time.Now()
	v, err := ls.live.Frame(r.Context(), g, series.FrameMeta{Name: name, Time: tm, Load: load})
	if err != nil {
		writeProblem(w, r, asProblem(&FieldError{Field: "body", Detail: err.Error()}, "body"))
		return
	}
	ans := liveAnswer{LiveValues: v, DecodeMS: ms(decode), LiveMS: ms(time.Since(t1))}
	key, keyed := idemResource(r)
	ls.values = append(ls.values, v)
	ls.job = append(ls.job, -1)
	for c := range ls.subs {
		select {
		case c <- v:
		default: // too far behind: end its stream
			delete(ls.subs, c)
			close(c)
		}
	}
	if v.Full {
		if j, err := s.queueLive(r.Context(), sr, ls, v.Index, liveFrame{body, name, tm, load}); err == nil {
			ans.FullFieldJob = j.ID
		} else {
			logger(r.Context()).Warn("live frame not queued for the full field", "series", sr.ID, "frame", v.Index, "error", err)
		}
	} else if ls.live.Options().Full == series.FullOnRequest {
		ls.frames[v.Index] = liveFrame{body, name, tm, load}
		delete(ls.frames, v.Index-onRequestKeep)
	}
	if keyed {
		ls.answers[key] = ans
		created(r)
	}
	writeJSON(w, http.StatusOK, ans)
}

// liveReplay answers a repeat of a live frame sent under an
// Idempotency-Key with the first answer. It returns false when the frame
// of resource id was not taken (yet); a series whose live session ended
// with a restart is answered with the live-ended problem.
func (s *Server) liveReplay(w http.ResponseWriter, r *http.Request, k *jobs.Key) bool {
	ls := s.liveSession(k.Series)
	if ls == nil {
		if p := s.liveEnded(r.Context(), k.Series); p != nil && k.Done {
			writeProblem(w, r, p)
			return true
		}
		return false
	}
	ls.mu.Lock()
	ans, ok := ls.answers[k.Resource]
	ls.mu.Unlock()
	if ok {
		writeJSON(w, http.StatusOK, ans)
	}
	return ok
}

// liveFrameExists reports whether the live frame of key k was taken.
func (s *Server) liveFrameExists(k *jobs.Key) bool {
	ls := s.liveSession(k.Series)
	if ls == nil {
		return false
	}
	ls.mu.Lock()
	defer ls.mu.Unlock()
	_, ok := ls.answers[k.Resource]
	return ok
}

func ms(d time.Duration) float64 { return float64(d.Microseconds()) / 1000 }

// queueLive appends live frame index as a frame job (ls.mu held).
func (s *Server) queueLive(ctx context.Context, sr *jobs.Series, ls *liveSession, index int, f liveFrame) (*jobs.Job, error) {
	j, _, err := s.queueFrame(ctx, sr, jobs.NewID(), nil, map[string][]byte{"deformed": f.body}, f.name, f.t, f.l)
	if err != nil {
		return nil, err
	}
	ls.job[index] = j.FrameIndex
	ls.lastQueue = index
	return j, nil
}

// postLiveFull asks for the full field of live frame {n} (series with the
// full field on request, or a frame not due under the policy).
func (s *Server) postLiveFull(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	ls := s.liveOrEnded(w, r, sr, "the series has no live mode in this server")
	if ls == nil {
		return
	}
	n, err := strconv.Atoi(chi.URLParam(r, "n"))
	ls.mu.Lock()
	defer ls.mu.Unlock()
	f, kept := ls.frames[n]
	switch {
	case err != nil || n < 1 || n >= len(ls.job):
		writeProblem(w, r, problem(http.StatusNotFound, "no-frame", "No such frame", fmt.Sprintf("live frame %q: give 1 to %d", chi.URLParam(r, "n"), len(ls.job)-1)))
		return
	case ls.job[n] >= 0:
		writeProblem(w, r, problem(http.StatusConflict, "full-field-queued", "Already queued", fmt.Sprintf("live frame %d already has its full-field job", n)))
		return
	case n <= ls.lastQueue || !kept:
		writeProblem(w, r, problem(http.StatusConflict, "out-of-order", "Frame no longer available",
			fmt.Sprintf("full fields are computed in frame order and only the last %d frames are kept; frame %d is before the last queued frame %d or no longer kept", onRequestKeep, n, ls.lastQueue)))
		return
	}
	j, err := s.queueLive(r.Context(), sr, ls, n, f)
	if err != nil {
		s.answerAcceptErr(w, r, err)
		return
	}
	for k := range ls.frames {
		if k <= n {
			delete(ls.frames, k)
		}
	}
	w.Header().Set("Location", jobPath(j))
	writeJSON(w, http.StatusAccepted, viewJob(j))
}

// liveEvents streams a live series: an event "live" with each frame's
// values, first those after ?after=N (default 0: all so far), then each
// new frame's as soon as it exists, until the client goes away.
func (s *Server) liveEvents(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	after := 0
	if v := r.URL.Query().Get("after"); v != "" {
		n, err := strconv.Atoi(v)
		if err != nil || n < 0 {
			writeProblem(w, r, problem(http.StatusBadRequest, "bad-query", "Invalid query", "after must be a frame index, 0 or more", FieldProblem{"after", "e.g. after=12"}))
			return
		}
		after = n
	}
	ls := s.liveOrEnded(w, r, sr, "the series has no live mode in this server; POST a frame to its live/frames route first")
	if ls == nil {
		return
	}
	ch := make(chan series.LiveValues, liveBacklog)
	ls.mu.Lock()
	for _, v := range ls.values {
		if v.Index > after {
			select {
			case ch <- v:
			default:
			}
		}
	}
	ls.subs[ch] = true
	ls.mu.Unlock()
	defer func() {
		ls.mu.Lock()
		if ls.subs[ch] {
			delete(ls.subs, ch)
			close(ch)
		}
		ls.mu.Unlock()
	}()
	pump(s, r, ch, startEvents(w), func(v series.LiveValues) (string, any, bool) { return "live", v, false })
}

// liveCurve merges a live session into the series curve c made by the
// frame jobs: a row per live frame, the full-field row where its job has
// one, the live row otherwise.
func liveCurve(c series.Curve, ls *liveSession) series.Curve {
	lc := ls.live.Curve()
	ls.mu.Lock()
	jobOf := map[int]int{}
	for i, k := range ls.job {
		if k >= 0 {
			jobOf[k+1] = i
		}
	}
	ls.mu.Unlock()
	rows := lc.Rows
	if len(c.Rows) > 0 {
		rows[0] = c.Rows[0]
	}
	for _, row := range c.Rows {
		if i, ok := jobOf[row.Index]; ok && row.Index > 0 && i < len(rows) {
			row.Index = i
			rows[i] = row
		}
	}
	c.Rows = rows
	return c
}

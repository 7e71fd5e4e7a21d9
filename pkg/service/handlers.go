package service

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"net/http"
	"strconv"
	"strings"
	"time"

	"github.com/go-chi/chi/v5"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// resultFiles are the whole-field result files served under a job.
var resultFiles = []string{"field.json", "field.csv", "field.vts", "field.npz"}

var contentTypes = map[string]string{
	"field.json": "application/json",
	"field.csv":  "text/csv; charset=utf-8",
	"field.vts":  "application/xml",
	"field.npz":  "application/zip",
}

// jobHandler serves a request about one job.
type jobHandler func(w http.ResponseWriter, r *http.Request, j *jobs.Job)

// analysis resolves {id} to an analysis job.
func (s *Server) analysis(h jobHandler) http.HandlerFunc {
	return func(w http.ResponseWriter, r *http.Request) {
		id := chi.URLParam(r, "id")
		if err := jobs.CheckID("analysis", id); err != nil {
			writeProblem(w, r, problem(http.StatusBadRequest, "bad-id", "Invalid id", err.Error(), FieldProblem{"id", "use the id returned by POST /v1/analyses"}))
			return
		}
		j, err := s.store.Job(r.Context(), id)
		if err == nil && j.Kind != jobs.Analysis && j.Kind != jobs.Stereo {
			err = jobs.ErrNotFound
		}
		if err != nil {
			writeProblem(w, r, asProblem(err, "id"))
			return
		}
		if !s.allowed(w, r, j.Project, j.Owner) {
			return
		}
		h(w, r, j)
	}
}

// frame resolves {id} and {n} to the job of frame n of a series.
func (s *Server) frame(h jobHandler) http.HandlerFunc {
	return s.series(func(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
		n, err := strconv.Atoi(chi.URLParam(r, "n"))
		if err != nil || n < 0 || n >= len(sr.Frames) {
			writeProblem(w, r, problem(http.StatusNotFound, "no-such-frame", "No such frame",
				fmt.Sprintf("frame %q does not exist; this series has frames 0 to %d", chi.URLParam(r, "n"), len(sr.Frames)-1),
				FieldProblem{"n", "use a frame index from 0 to the number of frames − 1"}))
			return
		}
		j, err := s.store.Job(r.Context(), sr.Frames[n])
		if err != nil {
			writeProblem(w, r, asProblem(err, "n"))
			return
		}
		h(w, r, j)
	})
}

// jobPath is the URL path of a job's resources.
func jobPath(j *jobs.Job) string {
	if j.Kind == jobs.Frame {
		return fmt.Sprintf("/v1/series/%s/frames/%d", j.Series, j.FrameIndex)
	}
	return "/v1/analyses/" + j.ID
}

// jobView is the JSON form of a job in responses.
type jobView struct {
	*jobs.Job
	Links map[string]string `json:"links"`
	// Field is field.json, included by ?wait=true answers.
	Field json.RawMessage `json:"field,omitempty"`
}

func viewJob(j *jobs.Job) *jobView {
	p := jobPath(j)
	l := map[string]string{"self": p, "events": p + "/events",
		"map": p + "/map.png", "reference": p + "/images/reference.png", "deformed": p + "/images/deformed.png"}
	if j.Kind != jobs.Frame {
		l["cancel"] = p + "/cancel"
		l["thumb"] = p + "/thumb.png"
	} else {
		l["series"] = "/v1/series/" + j.Series
	}
	for _, name := range resultFiles {
		l[name] = p + "/" + name
	}
	return &jobView{Job: j, Links: l}
}

func (s *Server) getJob(w http.ResponseWriter, r *http.Request, j *jobs.Job) {
	writeJSON(w, http.StatusOK, viewJob(j))
}

func (s *Server) listAnalyses(w http.ResponseWriter, r *http.Request) {
	f := jobs.Filter{Kind: jobs.Analysis}
	switch k := r.URL.Query().Get("kind"); k {
	case "", string(jobs.Analysis):
	case string(jobs.Stereo):
		f.Kind = jobs.Stereo
	default:
		writeProblem(w, r, problem(http.StatusBadRequest, "bad-query", "Invalid query", "kind "+strconv.Quote(k)+" is unknown",
			FieldProblem{"kind", "use analysis (2D, the default) or stereo"}))
		return
	}
	if st := r.URL.Query().Get("state"); st != "" {
		ok := false
		for _, v := range jobs.States() {
			ok = ok || string(v) == st
		}
		if !ok {
			writeProblem(w, r, problem(http.StatusBadRequest, "bad-query", "Invalid query", "state "+strconv.Quote(st)+" is unknown",
				FieldProblem{"state", "use queued, running, succeeded, failed or canceled"}))
			return
		}
		f.States = []jobs.State{jobs.State(st)}
	}
	limit := 100
	if v := r.URL.Query().Get("limit"); v != "" {
		n, err := strconv.Atoi(v)
		if err != nil || n < 1 || n > 1000 {
			writeProblem(w, r, problem(http.StatusBadRequest, "bad-query", "Invalid query", "limit "+strconv.Quote(v)+" is not a number from 1 to 1000",
				FieldProblem{"limit", "use 1 to 1000"}))
			return
		}
		limit = n
	}
	f.Limit, f.Newest = limit, true
	f.Keep = func(j *jobs.Job) bool { return readable(r, j.Project) }
	list, err := s.store.Jobs(r.Context(), f)
	if err != nil {
		writeProblem(w, r, asProblem(err, ""))
		return
	}
	out := make([]*jobView, 0, len(list))
	for i := len(list) - 1; i >= 0; i-- { // newest first
		out = append(out, viewJob(list[i]))
	}
	writeJSON(w, http.StatusOK, map[string]any{"analyses": out})
}

func (s *Server) postAnalysis(w http.ResponseWriter, r *http.Request) {
	if s.queueFull(w, r) {
		return
	}
	u, err := s.readMultipart(w, r, []string{"reference", "deformed"}, "mask")
	if err != nil {
		writeProblem(w, r, asProblem(err, "body"))
		return
	}
	ref, def := u.img["reference"], u.img["deformed"]
	raw, err := withCalibration(u.params, u)
	if err != nil {
		writeProblem(w, r, asProblem(err, "calibration"))
		return
	}
	p, err := s.checkParams(raw, ref.W, ref.H)
	if err == nil {
		err = imageio.CheckPair(ref, def, p.Subset)
	}
	if m := u.img["mask"]; err == nil && m != nil && (m.W != ref.W || m.H != ref.H) {
		err = &FieldError{Field: "mask", Detail: fmt.Sprintf("is %d×%d px but the reference is %d×%d px; the mask must match the reference", m.W, m.H, ref.W, ref.H)}
	}
	if err != nil {
		writeProblem(w, r, asProblem(err, "params"))
		return
	}
	name, perr := nameQuery(r, frameName(u.files["reference"], "reference")+" → "+frameName(u.files["deformed"], "deformed"))
	if perr != nil {
		writeProblem(w, r, perr)
		return
	}
	s.submit(w, r, p, ref, u.raw, u.img, name)
}

// submit stores the inputs and record of a new analysis, enqueues it and
// answers 202 (or, with ?wait=true, the finished job). decoded, if not
// nil, holds the images decoded from raw (s.decode), which the runner
// then takes instead of decoding the stored bytes again.
func (s *Server) submit(w http.ResponseWriter, r *http.Request, p analysis.Params, ref *imageio.Gray, raw map[string][]byte, decoded map[string]*imageio.Gray, name string) {
	wait, err := boolQuery(r, "wait", false)
	if err != nil {
		writeProblem(w, r, err.(*Problem))
		return
	}
	formats, err := ParseFormats(r.URL.Query().Get("formats"))
	if err != nil {
		writeProblem(w, r, asProblem(err, "formats"))
		return
	}
	params, _ := json.Marshal(p)
	proj, _ := chosenProject(r, caller(r.Context())) // checked by authenticate
	j := &jobs.Job{ID: newID(r), Kind: jobs.Analysis, State: jobs.Queued, Params: params, Name: name, Project: proj, Owner: caller(r.Context()).Name,
		Width: ref.W, Height: ref.H, HasMask: raw["mask"] != nil, Formats: formats.String(), Created: time.Now().UTC()}
	s.submitJob(w, r, j, raw, decoded, wait)
}

// submitJob stores the inputs raw and the record of the new job j (an
// analysis or a stereo measurement), enqueues it and answers as submit.
func (s *Server) submitJob(w http.ResponseWriter, r *http.Request, j *jobs.Job, raw map[string][]byte, decoded map[string]*imageio.Gray, wait bool) {
	primed := s.prime(j.ID, raw, decoded)
	if err := s.accept(r.Context(), j, raw); errors.Is(err, jobs.ErrExists) {
		s.run.Unprime(primed...)
		// A repeat under an Idempotency-Key that another instance
		// created meanwhile.
		if j, err = s.store.Job(r.Context(), j.ID); err != nil {
			writeProblem(w, r, asProblem(err, ""))
			return
		}
	} else if err != nil {
		s.run.Unprime(primed...)
		s.answerAcceptErr(w, r, err)
		return
	} else {
		s.recordJob(r.Context(), jobs.AuditCreate, j, "")
	}
	created(r)
	logger(r.Context()).Info("analysis accepted", "job", j.ID, "kind", j.Kind, "width", j.Width, "height", j.Height)
	s.answerJob(w, r, j, wait)
}

// prime hands the runner the images of job id decoded from raw, so the
// job reads each stored image once instead of decoding it again; only
// images that were not turned by an EXIF orientation are the stored
// pixels as they are. It returns their blob keys.
func (s *Server) prime(id string, raw map[string][]byte, decoded map[string]*imageio.Gray) []string {
	var keys []string
	for name, g := range decoded {
		if _, ok := raw[name]; !ok || g == nil || !g.Orientation.Upright() {
			continue
		}
		k := jobs.InputKey(id, name)
		s.run.Prime(k, g)
		keys = append(keys, k)
	}
	return keys
}

// accept stores the inputs and the record and enqueues the job. If the
// queue is full, everything is removed again and ErrQueueFull returned:
// the job was not accepted. ErrExists means a job with that id (chosen
// under an Idempotency-Key) exists already, and is left as it is.
func (s *Server) accept(ctx context.Context, j *jobs.Job, raw map[string][]byte) error {
	if err := jobs.PutAll(ctx, s.blobs, raw, func(name string) string { return jobs.InputKey(j.ID, name) }); err != nil {
		s.blobs.Delete(ctx, jobs.JobKey(j.ID))
		return err
	}
	if err := s.store.CreateJob(ctx, j); errors.Is(err, jobs.ErrExists) {
		return err // the inputs are the existing job's
	} else if err != nil {
		s.blobs.Delete(ctx, jobs.JobKey(j.ID))
		return err
	}
	if err := s.queue.Enqueue(ctx, j.ID); err != nil {
		s.store.DeleteJob(ctx, j.ID)
		s.blobs.Delete(ctx, jobs.JobKey(j.ID))
		return err
	}
	return nil
}

func (s *Server) answerAcceptErr(w http.ResponseWriter, r *http.Request, err error) {
	if errors.Is(err, jobs.ErrQueueFull) {
		s.metrics.reject()
		retryAfter(w, s.retrySeconds())
	}
	writeProblem(w, r, asProblem(err, ""))
}

// queueFull answers 429 early, before reading the body, when the queue is
// already full.
func (s *Server) queueFull(w http.ResponseWriter, r *http.Request) bool {
	if s.draining.Load() {
		writeProblem(w, r, problem(http.StatusServiceUnavailable, "draining", "Shutting down", "the server is shutting down; retry on another instance or after it restarts"))
		return true
	}
	if s.queue.Len() < s.queue.Cap() {
		return s.ownerQueueFull(w, r)
	}
	s.answerAcceptErr(w, r, jobs.ErrQueueFull)
	return true
}

// retrySeconds estimates when a queue slot frees: the queue's share per
// worker times the mean job time.
func (s *Server) retrySeconds() float64 {
	st := s.run.Stats()
	n := st.Finished[jobs.Succeeded]
	mean := 1.0
	if n > 0 {
		mean = st.ComputeSeconds / float64(n)
	}
	return mean * float64(s.queue.Len()/s.cfg.Workers+1) / 2
}

// answerJob answers 202 with the job, or waits for it with ?wait=true.
func (s *Server) answerJob(w http.ResponseWriter, r *http.Request, j *jobs.Job, wait bool) {
	w.Header().Set("Location", jobPath(j))
	if !wait {
		writeJSON(w, http.StatusAccepted, viewJob(j))
		return
	}
	done, err := s.await(w, r, j.ID)
	if err != nil || !done.State.Terminal() {
		if done == nil {
			done = j
		}
		writeJSON(w, http.StatusAccepted, viewJob(done))
		return
	}
	v := viewJob(done)
	switch done.State {
	case jobs.Succeeded:
		b, err := s.readBlob(r.Context(), jobs.ResultKey(done.ID, "field.json"))
		if err != nil || !json.Valid(b) {
			b = nil
		}
		writeJobField(w, http.StatusOK, v, b)
	case jobs.Failed:
		p := problem(http.StatusUnprocessableEntity, "analysis-failed", done.Error.Title, done.Error.Detail)
		if done.Error.Field != "" {
			p.Errors = []FieldProblem{{done.Error.Field, done.Error.Detail}}
		}
		p.Job, p.State = done.ID, done.State
		writeProblem(w, r, p)
	default:
		p := problem(http.StatusConflict, "canceled", "Canceled", "the job was canceled before it finished")
		p.Job, p.State = done.ID, done.State
		writeProblem(w, r, p)
	}
}

// await waits, for at most JobTimeout, until job id is finished, and returns
// its last record.
func (s *Server) await(w http.ResponseWriter, r *http.Request, id string) (*jobs.Job, error) {
	_ = http.NewResponseController(w).SetWriteDeadline(time.Now().Add(s.cfg.JobTimeout + time.Minute))
	ctx, cancel := context.WithTimeout(r.Context(), s.cfg.JobTimeout)
	defer cancel()
	ch, err := s.store.Watch(ctx, id)
	if err != nil {
		return nil, err
	}
	var last *jobs.Job
	for {
		select {
		case j, ok := <-ch:
			if !ok {
				return last, ctx.Err()
			}
			last = j
			if j.State.Terminal() {
				return j, nil
			}
		case <-s.stopping:
			return last, errShutdown
		}
	}
}

func boolQuery(r *http.Request, name string, def bool) (bool, error) {
	v := r.URL.Query().Get(name)
	if v == "" {
		return def, nil
	}
	b, err := strconv.ParseBool(v)
	if err != nil {
		return def, problem(http.StatusBadRequest, "bad-query", "Invalid query", name+" "+strconv.Quote(v)+" is not true or false",
			FieldProblem{name, "use true or false"})
	}
	return b, nil
}

func intQuery(r *http.Request, name string) (*int, error) {
	v := r.URL.Query().Get(name)
	if v == "" {
		return nil, nil
	}
	n, err := strconv.Atoi(v)
	if err != nil || n < 0 {
		return nil, problem(http.StatusBadRequest, "bad-query", "Invalid query", name+" "+strconv.Quote(v)+" is not a whole number ≥ 0",
			FieldProblem{name, "use the frame number the series gives this frame, counting from 0"})
	}
	return &n, nil
}

func floatQuery(r *http.Request, name string) (*float64, error) {
	v := r.URL.Query().Get(name)
	if v == "" {
		return nil, nil
	}
	f, err := strconv.ParseFloat(v, 64)
	if err != nil || math.IsNaN(f) || math.IsInf(f, 0) {
		return nil, problem(http.StatusBadRequest, "bad-query", "Invalid query", name+" "+strconv.Quote(v)+" is not a finite number",
			FieldProblem{name, "use a number such as 12.5"})
	}
	return &f, nil
}

func (s *Server) deleteAnalysis(w http.ResponseWriter, r *http.Request, j *jobs.Job) {
	if err := s.deleteJob(r.Context(), j.ID); err != nil {
		writeProblem(w, r, asProblem(err, "id"))
		return
	}
	s.recordJob(r.Context(), jobs.AuditDelete, j, "")
	w.WriteHeader(http.StatusNoContent)
}

func (s *Server) cancelAnalysis(w http.ResponseWriter, r *http.Request, j *jobs.Job) {
	j, err := s.cancelJob(r.Context(), j.ID)
	if err != nil {
		writeProblem(w, r, asProblem(err, "id"))
		return
	}
	s.recordJob(r.Context(), jobs.AuditCancel, j, cancelDetail(j))
	writeJSON(w, http.StatusAccepted, viewJob(j))
}

func (s *Server) postDemo(w http.ResponseWriter, r *http.Request) {
	if s.cfg.Demo == nil {
		writeProblem(w, r, problem(http.StatusNotImplemented, "no-demo", "No demo", "this server was started without the built-in demo pair"))
		return
	}
	if s.queueFull(w, r) {
		return
	}
	ref, def, p, err := s.cfg.Demo(r.Context())
	if err == nil {
		err = p.Validate(ref.W, ref.H)
	}
	if err != nil {
		writeProblem(w, r, asProblem(fmt.Errorf("demo: %w", err), ""))
		return
	}
	raw := map[string][]byte{}
	for name, g := range map[string]*imageio.Gray{"reference": ref, "deformed": def} {
		var b bytes.Buffer
		if err := imageio.WritePNG(&b, g, pngBits(g)); err != nil {
			writeProblem(w, r, asProblem(fmt.Errorf("demo: %w", err), ""))
			return
		}
		raw[name] = b.Bytes()
	}
	name, perr := nameQuery(r, "Demo specimen")
	if perr != nil {
		writeProblem(w, r, perr)
		return
	}
	s.submit(w, r, p, ref, raw, nil, name)
}

func pngBits(g *imageio.Gray) int {
	if g.Bits > 8 {
		return 16
	}
	return 8
}

// ready answers 409 unless j has succeeded.
func ready(w http.ResponseWriter, r *http.Request, j *jobs.Job) bool {
	if j.State == jobs.Succeeded {
		return true
	}
	detail := "the job is " + string(j.State) + "; results exist once it has succeeded (watch " + jobPath(j) + "/events)"
	if j.State == jobs.Failed && j.Error != nil {
		detail = "the job failed: " + j.Error.Detail
	}
	p := problem(http.StatusConflict, "not-ready", "Results not available", detail)
	p.Job, p.State = j.ID, j.State
	writeProblem(w, r, p)
	return false
}

func (s *Server) serveResult(w http.ResponseWriter, r *http.Request, j *jobs.Job, name, ctype string) {
	if !ready(w, r, j) {
		return
	}
	rc, err := s.blobs.Get(r.Context(), jobs.ResultKey(j.ID, name))
	if errors.Is(err, jobs.ErrNotFound) {
		rc, err = s.renderResult(r.Context(), j, name)
	}
	if err != nil {
		writeProblem(w, r, asProblem(err, name))
		return
	}
	defer rc.Close()
	h := w.Header()
	h.Set("Content-Type", ctype)
	h.Set("Cache-Control", "private, max-age=3600")
	base := name[strings.LastIndexByte(name, '/')+1:]
	h.Set("Content-Disposition", fmt.Sprintf("attachment; filename=%q", base))
	w.WriteHeader(http.StatusOK)
	_, _ = io.Copy(w, rc)
}

func (s *Server) resultFile(name string) jobHandler {
	return func(w http.ResponseWriter, r *http.Request, j *jobs.Job) {
		s.serveResult(w, r, j, name, contentTypes[name])
	}
}

func (s *Server) array(w http.ResponseWriter, r *http.Request, j *jobs.Job) {
	q := chi.URLParam(r, "quantity")
	if !jobs.ValidName(q) {
		writeProblem(w, r, problem(http.StatusBadRequest, "bad-quantity", "Invalid quantity", "quantity "+strconv.Quote(q)+" is not a quantity name",
			FieldProblem{"quantity", "use a name such as u, v, E11, E22, E12"}))
		return
	}
	// Arrays the job did not write are rendered from field.npz, unless it
	// wrote arrays and this quantity is not among them.
	if j.State == jobs.Succeeded && !hasResult(j, "arrays/"+q+".npy") && (len(arrayNames(j)) > 0 || !hasResult(j, "field.npz")) {
		writeProblem(w, r, problem(http.StatusNotFound, "unknown-quantity", "Unknown quantity", "the results have no quantity "+strconv.Quote(q),
			FieldProblem{"quantity", "use one of: " + strings.Join(arrayNames(j), ", ")}))
		return
	}
	s.serveResult(w, r, j, "arrays/"+q+".npy", "application/octet-stream")
}

// renderResult renders a result file that the job did not write from its
// stored result (field.npz) with the one table of result files, keeps it
// in the blob store for later requests and returns it. A file of no
// format, or of a quantity the field lacks, is jobs.ErrNotFound.
func (s *Server) renderResult(ctx context.Context, j *jobs.Job, name string) (io.ReadCloser, error) {
	format := formatOf(name)
	if format == "" || !hasResult(j, "field.npz") {
		return nil, jobs.ErrNotFound
	}
	f, err := readStored(func(n string) (io.ReadCloser, error) { return s.blobs.Get(ctx, jobs.ResultKey(j.ID, n)) })
	if err != nil {
		return nil, err
	}
	files, err := encodeFiles(f, results.Set{format: true})
	if err != nil {
		return nil, err
	}
	b, ok := files[name]
	if !ok {
		names := f.Names()
		return nil, &FieldError{Field: "quantity", Status: http.StatusNotFound, Detail: fmt.Sprintf("the results have no %s; the field has %s", name, strings.Join(names, ", "))}
	}
	for n, data := range files {
		if err := s.blobs.Put(ctx, jobs.ResultKey(j.ID, n), bytes.NewReader(data)); err != nil {
			s.log.Warn("keep rendered result", "job", j.ID, "file", n, "error", err)
		}
	}
	return io.NopCloser(bytes.NewReader(b)), nil
}

func hasResult(j *jobs.Job, name string) bool {
	for _, n := range j.Results {
		if n == name {
			return true
		}
	}
	return false
}

func arrayNames(j *jobs.Job) []string {
	var out []string
	for _, n := range j.Results {
		if q, ok := strings.CutPrefix(n, "arrays/"); ok {
			out = append(out, strings.TrimSuffix(q, ".npy"))
		}
	}
	return out
}

func (s *Server) mapPNG(w http.ResponseWriter, r *http.Request, j *jobs.Job) {
	q := r.URL.Query()
	req := MapRequest{Quantity: q.Get("quantity"), On: q.Get("on")}
	if req.Quantity == "" {
		writeProblem(w, r, problem(http.StatusBadRequest, "bad-query", "Invalid query", "quantity is required",
			FieldProblem{"quantity", "name the quantity to map, e.g. quantity=E11"}))
		return
	}
	if req.On == "" {
		req.On = "reference"
	}
	if req.On != "reference" && req.On != "deformed" {
		writeProblem(w, r, problem(http.StatusBadRequest, "bad-query", "Invalid query", "on "+strconv.Quote(req.On)+" is unknown",
			FieldProblem{"on", "use reference or deformed"}))
		return
	}
	if v := q.Get("range"); v != "" {
		a, b, ok := strings.Cut(v, ",")
		lo, err1 := strconv.ParseFloat(strings.TrimSpace(a), 64)
		hi, err2 := strconv.ParseFloat(strings.TrimSpace(b), 64)
		if !ok || err1 != nil || err2 != nil || math.IsNaN(lo) || math.IsNaN(hi) || math.IsInf(lo, 0) || math.IsInf(hi, 0) || !(lo < hi) {
			writeProblem(w, r, problem(http.StatusBadRequest, "bad-query", "Invalid query", "range "+strconv.Quote(v)+" is not two finite numbers low,high with low < high",
				FieldProblem{"range", "use e.g. range=-0.01,0.01"}))
			return
		}
		req.Range = &[2]float64{lo, hi}
	}
	if !ready(w, r, j) {
		return
	}
	bgKey := jobs.InputKey(j.ID, "deformed")
	if req.On == "reference" {
		bgKey = jobs.InputKey(j.ID, "reference")
		if j.Kind == jobs.Frame {
			bgKey = jobs.SeriesKey(j.Series, "reference")
		}
	}
	bg, err := s.loadImage(r.Context(), bgKey)
	if err != nil {
		writeProblem(w, r, asProblem(err, ""))
		return
	}
	open := func(name string) (io.ReadCloser, error) {
		return s.blobs.Get(r.Context(), jobs.ResultKey(j.ID, name))
	}
	png, err := s.cfg.Analyzer.Map(r.Context(), open, req, bg)
	if err != nil {
		writeProblem(w, r, asProblem(err, "quantity"))
		return
	}
	w.Header().Set("Content-Type", "image/png")
	w.Header().Set("Cache-Control", "private, max-age=3600")
	w.WriteHeader(http.StatusOK)
	_, _ = w.Write(png)
}

func (s *Server) image(which string) jobHandler {
	return func(w http.ResponseWriter, r *http.Request, j *jobs.Job) {
		key := jobs.InputKey(j.ID, which)
		if which == "reference" && j.Kind == jobs.Frame {
			key = jobs.SeriesKey(j.Series, "reference")
		}
		stretch := false
		switch v := r.URL.Query().Get("stretch"); v {
		case "", "false":
		case "true":
			stretch = true
		default:
			writeProblem(w, r, problem(http.StatusBadRequest, "bad-query", "Bad query", "stretch must be true or false",
				FieldProblem{Field: "stretch", Detail: fmt.Sprintf("is %q; use true for an 8-bit preview with the grey range stretched to 0–255, or false for the image's own levels", v)}))
			return
		}
		g, err := s.loadImage(r.Context(), key)
		if err != nil {
			writeProblem(w, r, asProblem(err, which))
			return
		}
		if stretch {
			_, _, lo, hi := imageio.Stats(g)
			g = stretched(g, lo, hi)
		}
		var b bytes.Buffer
		if err := imageio.WritePNG(&b, g, pngBits(g)); err != nil {
			writeProblem(w, r, asProblem(err, which))
			return
		}
		w.Header().Set("Content-Type", "image/png")
		w.Header().Set("Cache-Control", "private, max-age=3600")
		w.WriteHeader(http.StatusOK)
		_, _ = w.Write(b.Bytes())
	}
}

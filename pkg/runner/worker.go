package runner

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"runtime"
	"sort"
	"sync"
	"time"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// work takes jobs from the queue until dequeueCtx is done. Jobs run under
// jobCtx, which is canceled (cause errShutdown) when the shutdown grace
// period is over.
func (s *Runner) work(dequeueCtx, jobCtx context.Context) {
	for dequeueCtx.Err() == nil {
		d, err := s.queue.Dequeue(dequeueCtx)
		if err != nil {
			if dequeueCtx.Err() != nil {
				return
			}
			s.log.Error("dequeue", "error", err)
			select {
			case <-dequeueCtx.Done():
				return
			case <-time.After(time.Second):
			}
			continue
		}
		if dequeueCtx.Err() != nil {
			_ = d.Nak() // shutdown began while waiting: leave it for the next run
			return
		}
		s.runJob(jobCtx, d)
	}
}

var errSkip = errors.New("skip")

// runJob computes one delivered job and records the outcome.
func (s *Runner) runJob(base context.Context, d jobs.Delivery) {
	id := d.ID()
	ctx := context.Background()
	l := s.log.With("job", id)
	turn, prev := s.waitTurn(base, id, d)
	if !turn {
		// Frame n of a series needs frame n−1's tracker state: put it back
		// until the previous frame has finished.
		l.Debug("frame held back: the previous frame has not finished")
		_ = d.Nak() // the backend logs a failure
		return
	}
	now := time.Now().UTC()
	j, err := s.store.UpdateJob(ctx, id, func(j *jobs.Job) error {
		if j.State != jobs.Queued {
			return errSkip
		}
		if j.Attempts >= s.cfg.MaxAttempts {
			j.State = jobs.Failed
			j.Finished = &now
			j.Error = &jobs.Failure{Title: "Too many attempts",
				Detail: fmt.Sprintf("the job was started %d times without finishing (the server stopped each time); check the server logs, then submit it again, perhaps with a larger step", j.Attempts)}
			return nil
		}
		j.State = jobs.Running
		j.Started = &now
		j.Attempts++
		j.Progress = jobs.Progress{}
		return nil
	})
	switch {
	case errors.Is(err, jobs.ErrNotFound), errors.Is(err, errSkip):
		_ = d.Ack()
		return
	case err != nil:
		l.Error("start job", "error", err)
		time.Sleep(time.Second)
		_ = d.Nak()
		return
	case j.State != jobs.Running:
		s.metrics.jobDone(j.State, 0, 0)
		_ = d.Ack()
		return
	}

	jctx, cancel := context.WithCancelCause(base)
	jctx, cancelT := context.WithTimeoutCause(jctx, s.cfg.JobTimeout, errJobTimeout)
	s.mu.Lock()
	s.running[id] = cancel
	s.mu.Unlock()
	go s.watchCancel(jctx, id, cancel)
	s.metrics.setBusy(1)
	if j.Kind == jobs.Frame {
		s.metrics.inFlight(j.Series, 1)
	}
	defer func() {
		if j.Kind == jobs.Frame {
			s.metrics.inFlight(j.Series, -1)
		}
		s.metrics.setBusy(-1)
		s.mu.Lock()
		delete(s.running, id)
		s.mu.Unlock()
		cancelT()
		cancel(nil)
	}()
	l.Info("job started", "kind", j.Kind, "attempt", j.Attempts, "width", j.Width, "height", j.Height)

	start := time.Now()
	var res *Result
	if h := s.cfg.BeforeCompute; h != nil {
		h(jctx, *j)
		err = jctx.Err() // a hold ended by cancellation, timeout or shutdown
	}
	if err == nil {
		res, err = s.compute(jctx, j, d, prev)
	}
	secs := time.Since(start).Seconds()
	var names []string
	if err == nil {
		names, err = s.storeResults(ctx, j.ID, res)
	}
	if err == nil && res.State != nil {
		// The new state goes in before the frame counts as done; the state
		// it was made from is kept until then, so a crash in between
		// repeats the frame from the same start.
		// A state may name the frame's solution (series.StateBinaryRef):
		// that solution was stored with Create, so nothing replaces it.
		err = s.blobs.Put(ctx, stateKeyOf(j.Series, j.FrameIndex, res.State), bytes.NewReader(res.State))
		if h := s.cfg.afterState; h != nil && err == nil {
			h(*j)
		}
	}
	cause := context.Cause(jctx)
	if err != nil && jctx.Err() == nil {
		cause = nil // failed on its own, not because it was stopped
	}
	fin := time.Now().UTC()
	var final jobs.State
	switch {
	case err == nil:
		final = jobs.Succeeded
		sum := res.Summary
		sum.Seconds = secs
		_, err = s.store.UpdateJob(ctx, id, func(j *jobs.Job) error {
			j.State, j.Finished, j.Summary, j.Results = jobs.Succeeded, &fin, &sum, names
			j.Progress = jobs.Progress{Done: sum.Points, Total: sum.Points}
			return nil
		})
		s.metrics.jobDone(final, sum.Points, secs)
		if err == nil && res.State != nil {
			s.dropOldState(ctx, j, res.stateFrom)
			s.dropSolved(ctx, j)
		}
	case errors.Is(cause, errShutdown):
		l.Info("job interrupted by shutdown: back in the queue")
		_, err = s.store.UpdateJob(ctx, id, func(j *jobs.Job) error {
			j.State, j.Started, j.Progress = jobs.Queued, nil, jobs.Progress{}
			j.Attempts-- // an interruption by shutdown is not the job's fault
			return nil
		})
		if err != nil {
			l.Error("requeue job", "error", err)
		}
		_ = d.Nak()
		return
	case errors.Is(cause, errCanceled):
		final = jobs.Canceled
		_, err = s.store.UpdateJob(ctx, id, func(j *jobs.Job) error {
			j.State, j.Finished = jobs.Canceled, &fin
			return nil
		})
		s.metrics.jobDone(final, 0, secs)
	default:
		final = jobs.Failed
		f := failureFor(err, cause, s.cfg.JobTimeout)
		_, err = s.store.UpdateJob(ctx, id, func(j *jobs.Job) error {
			j.State, j.Finished, j.Error = jobs.Failed, &fin, f
			return nil
		})
		s.metrics.jobDone(final, 0, secs)
	}
	if err != nil {
		l.Error("record job outcome", "state", final, "error", err)
	}
	l.Info("job finished", "state", final, "seconds", secs)
	_ = d.Ack()
}

func failureFor(err, cause error, timeout time.Duration) *jobs.Failure {
	if errors.Is(cause, errJobTimeout) {
		return &jobs.Failure{Title: "Job timeout", Detail: fmt.Sprintf(
			"the job ran longer than the %v limit; use a larger step or a smaller ROI, or ask the operator for a longer --job-timeout", timeout)}
	}
	if jobs.IsNoSpace(err) {
		return &jobs.Failure{Title: "Insufficient storage", Detail: err.Error() +
			"; the job's results could not be stored and nothing stored earlier was changed. Free space on the server (or ask the operator), then submit the job again"}
	}
	var fe *FieldError
	if errors.As(err, &fe) {
		return &jobs.Failure{Title: "Invalid input", Detail: fe.Detail, Field: fe.Field}
	}
	var ve *analysis.ValidationError
	if errors.As(err, &ve) && len(ve.Problems) > 0 {
		return &jobs.Failure{Title: "Invalid parameters", Detail: ve.Error(), Field: "params." + ve.Problems[0].Field}
	}
	return &jobs.Failure{Title: "Analysis failed", Detail: err.Error()}
}

// frameWait bounds how long a worker holds a frame whose predecessor is
// running before putting it back in the queue. Holding the frame keeps
// its place: put back, it goes behind the later frames of its series,
// and each of those then waits in its turn before it is put back too.
// The bound frees the worker in case the predecessor's worker died and
// the record still says running until the queue delivers it again.
const frameWait = time.Minute

// frameQueuedWait is how long a worker holds a frame whose predecessor
// has not started (it is in the queue, perhaps behind this frame, or held
// by another worker that is about to start it) before putting it back. It
// is short, so that the frames of a series put out of order by a put-back
// come round again quickly; it is longer than the poll interval of
// waitPrevious, so that a predecessor another worker is just starting is
// seen running.
const frameQueuedWait = time.Second

// framePoll is the longest pause between two looks of waitPrevious at the
// previous frame: a frame waits at most this long after its predecessor
// finished, the hand-over time of a series whose frames are solved ahead
// (BenchmarkSimulatedCluster: with 250 ms, one series on 8 and 16 workers
// ran slower than on 4).
const framePoll = 50 * time.Millisecond

// computeFrame runs series frame j through the series engine, from the
// state after the last frame that succeeded before it. prev, if not nil,
// is the record of the frame before j as the gate read it finished, which
// the search for that frame takes rather than reading it again.
func (s *Runner) computeFrame(ctx context.Context, j, prev *jobs.Job, fa FrameAnalyzer, progress func(done, total int)) (*Result, error) {
	in := FrameInput{Params: j.Params, Name: j.Name, Time: j.Time, Load: j.Load, Formats: j.Formats,
		Threads: s.cfg.JobThreads, Progress: progress, RefName: "reference", StateJSON: s.cfg.StateJSON}
	if in.Name == "" {
		in.Name = fmt.Sprintf("frame_%d", j.FrameIndex)
	}
	if sr, err := s.seriesOf(ctx, j); err == nil && sr.ReferenceName != "" {
		in.RefName = sr.ReferenceName
	}
	var err error
	if in.Ref, err = s.loadSeriesImage(ctx, jobs.SeriesKey(j.Series, "reference"), nil); err != nil {
		return nil, err
	}
	in.Orientation = in.Ref.Orientation
	if in.Def, err = s.loadSeriesImage(ctx, jobs.InputKey(j.ID, "deformed"), &in.Orientation); err != nil {
		return nil, err
	}
	var read map[string]*jobs.Job
	if prev != nil {
		read = map[string]*jobs.Job{prev.ID: prev}
	}
	last, err := s.lastDoneOf(ctx, j, read)
	if err != nil {
		return nil, err
	}
	if last == nil && j.HasMask {
		// The engine keeps the mask in its state after the first frame.
		if in.Mask, err = s.LoadImage(ctx, jobs.SeriesKey(j.Series, "mask")); err != nil {
			return nil, err
		}
	}
	var from string
	if last != nil {
		if in.State, from, err = s.readState(ctx, j.Series, last.FrameIndex); err != nil {
			return nil, fmt.Errorf("series state after frame %d: %w; the series cannot continue, start a new series", last.FrameIndex, err)
		}
		solKey := SolveKey(j.Series, last.FrameIndex)
		in.StateSolution = func() ([]byte, error) { return s.ReadBlob(ctx, solKey) }
		// The last frame is read only if the engine needs it (not for a
		// frame of a direct-mode series added from its solution).
		key := jobs.InputKey(last.ID, "deformed")
		in.LoadLast = func() (*imageio.Gray, error) { return s.loadSeriesImage(ctx, key, &in.Orientation) }
	}
	if in.Solved = s.solvedFor(ctx, j); in.Solved != nil {
		start := time.Now()
		defer func() { s.metrics.added(time.Since(start).Seconds()) }()
	}
	res, err := fa.Frame(ctx, in)
	if res != nil {
		res.stateFrom = from
	}
	return res, err
}

// compute loads the inputs of j and runs the analyzer; prev is the
// record of the frame before j as the frame gate last read it, or nil.
func (s *Runner) compute(ctx context.Context, j *jobs.Job, d jobs.Delivery, prev *jobs.Job) (*Result, error) {
	var last, beat time.Time
	progress := func(done, total int) {
		now := time.Now()
		if now.Sub(last) < 200*time.Millisecond && done < total {
			return
		}
		last = now
		_ = s.store.SetProgress(context.Background(), j.ID, jobs.Progress{Done: done, Total: total})
		if now.Sub(beat) > 5*time.Second {
			beat = now
			_ = d.InProgress()
		}
	}
	if j.Kind == jobs.Stereo {
		return s.computeStereo(ctx, j)
	}
	if j.Kind == jobs.Frame {
		if sr, err := s.seriesOf(ctx, j); err == nil && sr.Kind == jobs.Stereo {
			return s.computeStereoFrame(ctx, j, sr)
		}
	}
	if fa, ok := s.cfg.Analyzer.(FrameAnalyzer); ok && j.Kind == jobs.Frame {
		return s.computeFrame(ctx, j, prev, fa, progress)
	}
	in := Input{Formats: j.Formats}
	if err := json.Unmarshal(j.Params, &in.Params); err != nil {
		return nil, fmt.Errorf("stored parameters: %w", err)
	}
	in.Params.Threads = s.cfg.JobThreads
	if j.Kind == jobs.Analysis {
		// The idle cores change how fast, not what: the files record
		// JobThreads whatever the count (the cluster test compares them
		// byte for byte with the embedded backend's).
		in.Threads = s.analysisThreads()
	}
	refKey, maskKey := jobs.InputKey(j.ID, "reference"), jobs.InputKey(j.ID, "mask")
	if j.Kind == jobs.Frame {
		refKey, maskKey = jobs.SeriesKey(j.Series, "reference"), jobs.SeriesKey(j.Series, "mask")
	}
	var err error
	if in.Ref, err = s.LoadImage(ctx, refKey); err != nil {
		return nil, err
	}
	in.Orientation = in.Ref.Orientation
	if in.Def, err = s.LoadImageAs(ctx, jobs.InputKey(j.ID, "deformed"), in.Orientation); err != nil {
		return nil, err
	}
	if j.HasMask {
		if in.Mask, err = s.LoadImage(ctx, maskKey); err != nil {
			return nil, err
		}
	}
	// The key hashes every reference pixel: the analyzer asks for it
	// beside the correlation, not before it.
	key := sync.OnceValue(func() [32]byte { return refQualityKey(in.Ref, in.Mask, j.Params) })
	in.RefMeasures = func() *quality.Measures { return s.refq.get(key()) }
	res, err := s.cfg.Analyzer.Run(ctx, in, progress)
	if err == nil && res.RefMeasures != nil {
		s.refq.put(key(), *res.RefMeasures)
	}
	return res, err
}

// analysisThreads is the thread count of an analysis job starting now:
// JobThreads, or with the default JobThreads the cores split among the
// running jobs (this one included), at least one each.
func (s *Runner) analysisThreads() int {
	if !s.cfg.spareThreads {
		return s.cfg.JobThreads
	}
	s.mu.Lock()
	n := len(s.running)
	s.mu.Unlock()
	return max(s.cfg.JobThreads, runtime.GOMAXPROCS(0)/max(n, 1))
}

// LoadImage decodes the stored image under key, turned upright by its own
// EXIF orientation (see upright).
func (s *Runner) LoadImage(ctx context.Context, key string) (*imageio.Gray, error) {
	g, err := s.loadStored(ctx, key)
	if err != nil {
		return nil, err
	}
	return upright(key, g, g.Orientation)
}

// LoadImageAs decodes the stored image under key turned by o, the
// orientation of its series or pair reference: the camera does not turn
// during a test, so every frame takes the reference's turn whatever its
// own tag says (imageio.OrientSeries).
func (s *Runner) LoadImageAs(ctx context.Context, key string, o imageio.Orientation) (*imageio.Gray, error) {
	g, err := s.loadStored(ctx, key)
	if err != nil {
		return nil, err
	}
	return upright(key, g, o)
}

// loadStored decodes the stored image under key as stored.
func (s *Runner) loadStored(ctx context.Context, key string) (*imageio.Gray, error) {
	if g := s.takePrimed(key); g != nil {
		return g, nil
	}
	rc, err := s.blobs.Get(ctx, key)
	if err != nil {
		return nil, fmt.Errorf("stored image: %w", err)
	}
	defer rc.Close()
	g, err := imageio.Decode(rc, s.Limits())
	if err != nil {
		return nil, fmt.Errorf("stored image %s: %w", key, err)
	}
	return g, nil
}

// upright turns g by the EXIF orientation o (an exact permutation of the
// pixels, imageio.Orient), so that the service, like a browser, sees a
// camera JPEG the way the camera meant it; what names g in errors.
func upright(what string, g *imageio.Gray, o imageio.Orientation) (*imageio.Gray, error) {
	t, err := imageio.Orient(g, o)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", what, err)
	}
	return t, nil
}

// Limits are the decoding limits of stored images.
func (s *Runner) Limits() imageio.Limits {
	return imageio.Limits{MaxPixels: s.cfg.MaxPixels, MaxBytes: s.cfg.MaxBytes}
}

// storeResults puts every result file in the blob store and returns the
// sorted names.
func (s *Runner) storeResults(ctx context.Context, id string, res *Result) ([]string, error) {
	names := make([]string, 0, len(res.Files))
	for name := range res.Files {
		if !jobs.ValidKey(name) {
			return nil, fmt.Errorf("analyzer returned a result file with an invalid name %q", name)
		}
		names = append(names, name)
	}
	sort.Strings(names)
	if err := jobs.PutAll(ctx, s.blobs, res.Files, func(name string) string { return jobs.ResultKey(id, name) }); err != nil {
		return nil, err
	}
	return names, nil
}

// watchCancel cancels the job's context (cause errCanceled) once its
// record asks for it (CancelRequested), until ctx ends. Cancel stops a job
// that this runner runs directly; the record reaches the worker when the
// cancel was answered by another runner on the same backend (another
// node of a cluster), or by this one between the job's start and its
// entry in s.running. The watch's first record is the record as it is
// now, so a request made before the watch began is seen too.
func (s *Runner) watchCancel(ctx context.Context, id string, cancel context.CancelCauseFunc) {
	ch, err := s.store.Watch(ctx, id)
	if err != nil {
		if ctx.Err() == nil {
			s.log.Warn("watch a running job for cancel requests", "job", id, "error", err)
		}
		return
	}
	for j := range ch {
		if j.CancelRequested && j.State == jobs.Running {
			cancel(errCanceled)
			return
		}
	}
}

// Cancel cancels a queued job at once, or asks the worker running it to
// stop (directly when this runner runs it, through the job's record
// otherwise, see watchCancel). Finished jobs are left as they are.
func (s *Runner) Cancel(ctx context.Context, id string) (*jobs.Job, error) {
	now := time.Now().UTC()
	j, err := s.store.UpdateJob(ctx, id, func(j *jobs.Job) error {
		switch j.State {
		case jobs.Queued:
			j.State, j.Finished = jobs.Canceled, &now
		case jobs.Running:
			j.CancelRequested = true
		}
		return nil
	})
	if err != nil {
		return nil, err
	}
	if j.State == jobs.Running {
		s.mu.Lock()
		if c := s.running[id]; c != nil {
			c(errCanceled)
		}
		s.mu.Unlock()
	}
	return j, nil
}

// DeleteJob cancels the job if needed and removes its record and blobs.
func (s *Runner) DeleteJob(ctx context.Context, id string) error {
	if _, err := s.Cancel(ctx, id); err != nil {
		return err
	}
	if err := s.blobs.Delete(ctx, jobs.JobKey(id)); err != nil {
		return err
	}
	if err := s.store.DeleteJob(ctx, id); err != nil && !errors.Is(err, jobs.ErrNotFound) {
		return err
	}
	return nil
}

// ReadBlob reads a stored blob fully.
func (s *Runner) ReadBlob(ctx context.Context, key string) ([]byte, error) {
	rc, err := s.blobs.Get(ctx, key)
	if err != nil {
		return nil, err
	}
	defer rc.Close()
	return io.ReadAll(rc)
}

// Frames returns the frame jobs of series id in frame order.
func (s *Runner) Frames(ctx context.Context, id string) ([]*jobs.Job, error) {
	list, err := s.store.Jobs(ctx, jobs.Filter{Series: id})
	if err != nil {
		return nil, err
	}
	sort.Slice(list, func(a, b int) bool { return list[a].FrameIndex < list[b].FrameIndex })
	return list, nil
}

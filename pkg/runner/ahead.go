package runner

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"time"

	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// Frames solved ahead (issue 21). A frame of a series whose predecessor
// has not finished may be correlated at once, before its turn, when
//   - the analyzer is a FrameSolver and the series' parameters allow it
//     (direct or auto mode, SolvesAhead), and the last finished frame did
//     not go incremental, or the parameters split an incremental chain at
//     a frame that returns to direct correlation (auto mode with
//     return_direct: then the frames after the return need only its state,
//     so stretches of a series run side by side);
//   - the series allows more than one frame in flight (MaxInFlight) and the
//     frame is within that many frames of the last finished one: frame n
//     waits while frame n−MaxInFlight is unfinished, so at most
//     MaxInFlight frames of one series are computed at once, across every
//     worker of a cluster, and the rest of the workers serve other series
//     (the queue hands frames out first come, first served);
//   - it has not been solved already.
// The solution (a blob of the series) is stored with Create, so the first
// stored stays whoever else solves the frame, and the frame then waits
// for its predecessor as any frame does. In its turn it is added to the
// series state from the solution (FrameInput.Solved), in frame order, so
// the state is assembled in order whatever order the frames finish in; a
// frame whose solution did not converge is correlated again in sequence.
// Nothing about the frame's record changes while it is solved, so a
// worker that dies meanwhile loses only the solution.

// SolveKey is the blob key of the solution of frame n of a series.
func SolveKey(seriesID string, n int) string {
	return jobs.SeriesKey(seriesID, fmt.Sprintf("solved/%06d.bin", n))
}

// solveAhead solves job j (its record as just read) ahead of its turn
// when the rules above allow it, and reports whether it did. prev, if
// not nil, is the record of the frame before j as just read too.
// waitPrevious tries it at each look at the previous frame that finds the
// frame's turn not come yet, so that a frame held beyond the bound is
// solved as soon as the bound lets it, in its place in the queue.
func (s *Runner) solveAhead(ctx context.Context, j, prev *jobs.Job, d jobs.Delivery) bool {
	fs, ok := s.cfg.Analyzer.(FrameSolver)
	if !ok {
		return false
	}
	bg := context.Background()
	if j.Kind != jobs.Frame || j.FrameIndex == 0 || j.State != jobs.Queued {
		return false
	}
	id := j.ID
	sr, err := s.seriesOf(bg, j)
	if err != nil || sr.MaxInFlight <= 1 || j.FrameIndex > len(sr.Frames) || sr.Kind == jobs.Stereo {
		return false
	}
	n := j.FrameIndex
	read := map[string]*jobs.Job{} // the records of frames before n read in this look
	if prev != nil && prev.ID == sr.Frames[n-1] {
		read[prev.ID] = prev
	}
	if n >= sr.MaxInFlight {
		id := sr.Frames[n-sr.MaxInFlight]
		back, ok := read[id]
		if !ok {
			if back, err = s.store.Job(bg, id); err != nil {
				return false
			}
			read[id] = back
		}
		if !back.State.Terminal() {
			return false
		}
	}
	key := SolveKey(sr.ID, n)
	if rc, err := s.blobs.Get(bg, key); err == nil {
		rc.Close()
		return false // solved already
	}
	in := SolveInput{Params: sr.Params, Threads: s.cfg.JobThreads}
	// The guess: the nearest frame before n already solved, else the state
	// after the last finished frame.
	guess, from := guessNone, -1
	for k := n - 1; k > max(0, n-sr.MaxInFlight-1) && in.Guess == nil; k-- {
		if b, err := s.ReadBlob(bg, SolveKey(sr.ID, k)); err == nil {
			in.Guess, guess, from = b, guessSolved, k
		}
	}
	if guess == guessSolved && from < n-1 && from > 1 {
		// The frame just before n is not solved yet: move the guess on
		// along the step from the frame before it, if its solution is kept.
		if b, err := s.ReadBlob(bg, SolveKey(sr.ID, from-1)); err == nil {
			in.GuessBefore, in.GuessRatio, guess = b, s.stepRatio(bg, sr, j, from), guessExtrapolated
		}
	}
	last, err := s.lastDoneOf(bg, j, read)
	if err != nil {
		return false
	}
	// After a frame that went incremental the frames chain, unless the
	// parameters let a frame return to direct correlation.
	incremental := last != nil && last.Summary != nil && last.Summary.Mode == series.ModeIncremental
	if ok, err := fs.SolvesAhead(sr.Params, incremental); err != nil || !ok {
		return false
	}
	if in.Guess == nil && last != nil {
		if in.GuessState, err = s.ReadState(bg, sr.ID, last.FrameIndex); err != nil {
			in.GuessState = nil
		} else {
			guess, from = guessState, last.FrameIndex
		}
		if series.StateRefersSolution(in.GuessState) {
			// The state's points are those of the frame's solution: the
			// same guess, read from there.
			in.GuessState = nil
			if in.Guess, err = s.ReadBlob(bg, SolveKey(sr.ID, last.FrameIndex)); err != nil {
				in.Guess, guess, from = nil, guessNone, -1
			}
		}
	}

	s.metrics.inFlight(sr.ID, 1)
	defer s.metrics.inFlight(sr.ID, -1)
	l := s.log.With("job", id, "series", sr.ID, "frame", n)
	jctx, cancel := context.WithTimeoutCause(ctx, s.cfg.JobTimeout, errJobTimeout)
	defer cancel()
	var beat time.Time
	in.Progress = func(done, total int) {
		if now := time.Now(); now.Sub(beat) > 5*time.Second {
			beat = now
			_ = d.InProgress()
		}
	}
	if in.Ref, err = s.loadSeriesImage(jctx, jobs.SeriesKey(sr.ID, "reference"), nil); err != nil {
		l.Warn("solve ahead: reference", "error", err)
		return false
	}
	in.Orientation = in.Ref.Orientation
	if in.Def, err = s.loadSeriesImage(jctx, jobs.InputKey(j.ID, "deformed"), &in.Orientation); err != nil {
		l.Warn("solve ahead: frame", "error", err)
		return false
	}
	if j.HasMask {
		if in.Mask, err = s.LoadImage(jctx, jobs.SeriesKey(sr.ID, "mask")); err != nil {
			l.Warn("solve ahead: mask", "error", err)
			return false
		}
	}
	start := time.Now()
	b, err := fs.Solve(jctx, in)
	if err != nil {
		if !errors.Is(err, context.Canceled) && !errors.Is(err, context.DeadlineExceeded) {
			l.Info("solve ahead failed: the frame is computed in its turn", "error", err)
		}
		return false
	}
	if h := s.cfg.beforeSolutionStore; h != nil {
		h(*j)
	}
	// The first solution stored stays: a frame added from it stores a
	// state that names it, and a worker whose delivery ran out while it
	// stalled here (another worker has the frame since, and may have added
	// it) must not replace it.
	if err := s.blobs.Create(bg, key, bytes.NewReader(b)); errors.Is(err, jobs.ErrExists) {
		l.Info("frame solved ahead by another worker meanwhile: its solution is kept")
		return false
	} else if err != nil {
		l.Warn("store frame solution", "error", err)
		return false
	}
	s.metrics.solved(time.Since(start).Seconds(), guess)
	l.Info("frame solved ahead", "seconds", time.Since(start).Seconds(), "guess", guess, "guess_frame", from)
	return true
}

// The sources of the guess of a frame solved ahead (Stats, the log).
const (
	guessSolved       = "solution"     // the solution of a frame before it
	guessExtrapolated = "extrapolated" // that moved on from the frame before it
	guessState        = "state"        // the series state after the last finished frame
	guessNone         = "none"         // none: the seed search
)

// stepRatio is the ratio of the distance from frame from to frame j over
// the distance from frame from−1 to frame from: in time, when all three
// have one and they increase, else in frame indices.
func (s *Runner) stepRatio(ctx context.Context, sr *jobs.Series, j *jobs.Job, from int) float64 {
	r := float64(j.FrameIndex - from)
	if j.Time == nil {
		return r
	}
	a, err := s.store.Job(ctx, sr.Frames[from-1])
	if err != nil || a.Time == nil {
		return r
	}
	b, err := s.store.Job(ctx, sr.Frames[from])
	if err != nil || b.Time == nil {
		return r
	}
	if ta, tb, tj := *a.Time, *b.Time, *j.Time; ta < tb && tb < tj {
		return (tj - tb) / (tb - ta)
	}
	return r
}

// solveAheadHeld is solveAhead for a frame held since *held: the time a
// solve takes does not count as held (Stats.HeldSeconds).
func (s *Runner) solveAheadHeld(ctx context.Context, j, prev *jobs.Job, d jobs.Delivery, held *time.Time) bool {
	start := time.Now()
	ok := s.solveAhead(ctx, j, prev, d)
	*held = held.Add(time.Since(start))
	return ok
}

// solvedFor returns the stored solution of frame j, or nil.
func (s *Runner) solvedFor(ctx context.Context, j *jobs.Job) []byte {
	b, err := s.ReadBlob(ctx, SolveKey(j.Series, j.FrameIndex))
	if err != nil {
		return nil
	}
	return b
}

// dropSolved removes the solution of the frame two before j once j is in
// the series state. The solutions of j and of the frame before it stay
// until the next frame is added: a frame solved ahead while the one before
// it is still being solved takes its guess from j's, moved on along the
// step from the frame before j (series.Extrapolate), a read of two binary
// solutions instead of the series state. The last two frames' solutions
// stay until the series is deleted. A state that names its frame's
// solution for its points (series.StateBinaryRef) thus finds it: the
// solution of frame k goes only once a frame after k has been added, and
// the state after k is then no longer the series' last (a frame repeated
// after a crash between its state and its record starts from the state
// before, whose solution the drop, which comes after the record, has kept),
// and no write replaces it meanwhile (solveAhead stores with Create). A
// worker that stalled while it solved frame k may store its solution
// again after the drop: no state that is read names it then, and it goes
// with the series.
func (s *Runner) dropSolved(ctx context.Context, j *jobs.Job) {
	if j.FrameIndex < 2 {
		return
	}
	if err := jobs.DeleteKey(ctx, s.blobs, SolveKey(j.Series, j.FrameIndex-2)); err != nil && !errors.Is(err, jobs.ErrNotFound) {
		s.log.Warn("remove frame solution", "job", j.ID, "error", err)
	}
}

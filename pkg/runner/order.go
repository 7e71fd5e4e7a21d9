package runner

import (
	"context"
	"errors"
	"fmt"
	"sync"
	"sync/atomic"
	"time"

	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// waitPrevious waits until job id may run (see frameReady): for at most
// frameQueuedWait while the previous frame of its series has not started,
// and frameWait in all, telling the queue from time to time that the
// delivery is still held. Meanwhile it solves the frame ahead of its turn
// once the rules of solveAhead allow it, and the waits start again after
// the solve. It reports whether the job may run.
func (s *Runner) waitPrevious(ctx context.Context, id string, d jobs.Delivery) bool {
	ok, _ := s.waitTurn(ctx, id, d)
	return ok
}

// waitTurn is waitPrevious that also returns, when the job may run, the
// record of the previous frame as the look that let it go read it
// (finished then, so for good), or nil.
func (s *Runner) waitTurn(ctx context.Context, id string, d jobs.Delivery) (bool, *jobs.Job) {
	wctx, cancel := context.WithCancel(ctx)
	defer cancel()
	var done <-chan struct{} // framesDone's, from the first look that waits
	watching := new(atomic.Bool)
	start := s.clock.Now()
	beat := start
	var idle time.Time // since when the previous frame has been seen not running
	solved := false
	held := time.Now() // since when the frame has been held, not solving
	defer func() { s.metrics.held(time.Since(held).Seconds()) }()
	var looked time.Time // when yieldFrame last looked
	for wait := 10 * time.Millisecond; ; wait = nextWait(wait, watching.Load()) {
		// One look: the frame's own record (a cancel shows there), and
		// through the gate its predecessor's; solving ahead and yielding
		// use the same record rather than reading it again.
		j, err := s.store.Job(context.Background(), id)
		g := gateOpen // a record that cannot be read: the normal path deals with it
		var prev *jobs.Job
		if err == nil {
			g, prev = s.gateOf(context.Background(), j)
		}
		if g != gateOpen && done == nil {
			done, watching = s.framesDone(wctx, *j)
		}
		if g != gateOpen && !solved && s.solveAheadHeld(ctx, j, prev, d, &held) {
			solved = true
			start, beat, idle, wait = s.clock.Now(), s.clock.Now(), time.Time{}, 5*time.Millisecond
			if watching.Load() {
				// The watch wakes the frame when its predecessor finishes,
				// during the solve too (the wake waits in the channel): no
				// look, two record reads, until then.
				select {
				case <-ctx.Done():
					return false, nil
				case <-done:
				case <-s.clock.After(framePollWatched):
				}
			}
			continue
		}
		now := s.clock.Now()
		if g != gateOpen && !solved && now.Sub(looked) >= yieldLook {
			looked = now
			if s.yieldFrame(context.Background(), j) {
				return false, nil
			}
		}
		switch {
		case g == gateOpen:
			return true, prev
		case g == gateRunning:
			idle = time.Time{}
		case idle.IsZero():
			idle = now
		}
		if now.Sub(start) > frameWait || !idle.IsZero() && now.Sub(idle) > frameQueuedWait {
			return false, nil
		}
		if now.Sub(beat) > 2*time.Second {
			beat = now
			_ = d.InProgress()
		}
		select {
		case <-ctx.Done():
			return false, nil
		case <-done:
		case <-s.clock.After(wait):
		}
	}
}

// framesDone returns, for job j as read by the first look of the gate
// that found it waiting (a frame whose gate opens at once sets up no
// watch), a channel that receives when a frame of its series finishes that changes what the frame gate would find (wakes):
// its predecessor, whose end opens the gate, or the frame MaxInFlight
// before it, whose end lets it be solved ahead; or when the job's own
// record changes (a cancel). The gate then looks again at once rather
// than at its next poll, so that the hand-over from a frame to the next,
// solved ahead and waiting, does not wait for the poll interval; other
// frames finishing wake nothing (each look reads the frame's and the
// predecessor's records). The channel never receives (the gate polls
// only) for a job that is not a later frame of a series, or when the
// store cannot watch the series, until ctx ends. The watch is set up in
// the background, so that a store slow to start it (a distributed store
// loads its mirror first) never delays the gate; watching reports
// whether it is on, and the gate then polls only as a safety net
// (nextWait).
func (s *Runner) framesDone(ctx context.Context, j jobs.Job) (<-chan struct{}, *atomic.Bool) {
	out := make(chan struct{}, 1)
	watching := new(atomic.Bool)
	id := j.ID
	go func() {
		if j.Kind != jobs.Frame || j.FrameIndex == 0 || j.State != jobs.Queued {
			return
		}
		bound := 1
		if sr, err := s.seriesOf(ctx, &j); err == nil {
			bound = sr.MaxInFlight
		}
		w, err := s.store.Watch(ctx, j.Series)
		if err != nil {
			return
		}
		watching.Store(true)
		defer watching.Store(false)
		for f := range w {
			if f.ID == id || wakes(f, j.FrameIndex, bound) {
				select {
				case out <- struct{}{}:
				default: // a look is due already
				}
			}
		}
	}()
	return out, watching
}

// nextWait is the pause before the gate's next look after a pause of
// wait: doubling up to framePoll while the gate polls alone, and
// framePollWatched while a watch of the series wakes it (framesDone).
func nextWait(wait time.Duration, watching bool) time.Duration {
	if watching {
		return framePollWatched
	}
	return min(2*wait, framePoll)
}

// framePollWatched is the pause between two looks of a held frame while
// a watch of its series wakes it at every change that matters: the looks
// are then only a safety net, each two record reads that the nodes of a
// cluster answer (with 50 ms, five to ten of them a frame).
const framePollWatched = 250 * time.Millisecond

// wakes reports whether the update f of a job of a series is the end of a
// frame that frame n, held with at most bound frames of its series in
// flight, waits for: frame n−1 (its turn) or frame n−bound (solving it
// ahead, see solveAhead).
func wakes(f *jobs.Job, n, bound int) bool {
	if f.Kind != jobs.Frame || !f.State.Terminal() {
		return false
	}
	return f.FrameIndex == n-1 || bound > 1 && f.FrameIndex == n-bound
}

// yieldLook is how often a held frame looks whether it should give its
// worker to other work (yieldFrame).
const yieldLook = 250 * time.Millisecond

// yieldFrame reports whether job j, a frame held waiting, should be put
// back to let its worker serve other series (fair sharing, issue 21): it
// cannot be computed now, not even solved ahead (frame n−bound of its
// series has not finished, with bound its series' MaxInFlight, at least
// 1), and the queue holds more jobs than the frames after it in its own
// series that are still queued, so some other job is waiting. Put back,
// it goes behind that job. A lone series never yields: its later frames
// could not be computed either.
func (s *Runner) yieldFrame(ctx context.Context, j *jobs.Job) bool {
	q := s.queue.Len()
	if q == 0 {
		return false
	}
	if j.Kind != jobs.Frame || j.State != jobs.Queued {
		return false
	}
	sr, err := s.seriesOf(ctx, j)
	if err != nil || j.FrameIndex > len(sr.Frames) {
		return false
	}
	n, b := j.FrameIndex, max(1, sr.MaxInFlight)
	if n < b {
		return false
	}
	if back, err := s.store.Job(ctx, sr.Frames[n-b]); err != nil || back.State.Terminal() {
		return false
	}
	list, err := s.store.Jobs(ctx, jobs.Filter{Series: sr.ID})
	if err != nil {
		return false
	}
	own := 0
	for _, f := range list {
		if f.FrameIndex > n && f.State == jobs.Queued {
			own++
		}
	}
	return q > own
}

// missingFrameWait is how long a frame waits for the record of its
// predecessor to appear (its index is reserved before the record is
// written); after that the predecessor counts as never accepted.
const missingFrameWait = time.Minute

// gate is the answer of frameReady.
type gate int

const (
	gateOpen    gate = iota // the job may run
	gateRunning             // the previous frame is running (or its record cannot be read now)
	gateQueued              // the previous frame has not started
)

// frameReady reports whether job id may run now: anything but a series
// frame may; frame n of a series may once frame n−1 has finished
// (succeeded, failed or canceled), so that the frames of one series run
// one at a time and in order while different series run in parallel.
// If it may not, it tells whether frame n−1 is running.
func (s *Runner) frameReady(ctx context.Context, id string) gate {
	j, err := s.store.Job(ctx, id)
	if err != nil {
		return gateOpen // the normal path deals with it
	}
	g, _ := s.gateOf(ctx, j)
	return g
}

// gateOf is frameReady for the record j just read. It also returns the
// record of the previous frame when it read it.
func (s *Runner) gateOf(ctx context.Context, j *jobs.Job) (gate, *jobs.Job) {
	if j.Kind != jobs.Frame || j.FrameIndex == 0 || j.State != jobs.Queued {
		return gateOpen, nil // the normal path deals with it
	}
	sr, err := s.seriesOf(ctx, j)
	if err != nil || j.FrameIndex > len(sr.Frames) {
		return gateOpen, nil
	}
	prev, err := s.store.Job(ctx, sr.Frames[j.FrameIndex-1])
	switch {
	case errors.Is(err, jobs.ErrNotFound):
		if s.clock.Now().Sub(j.Created) > missingFrameWait {
			return gateOpen, nil
		}
		return gateQueued, nil
	case err != nil:
		// A store switching over: wait in place, as a put-back would
		// likely fail too.
		return gateRunning, nil
	case prev.State.Terminal():
		return gateOpen, prev
	case prev.State == jobs.Running:
		return gateRunning, prev
	}
	return gateQueued, prev
}

// clock is the time source of the frame gate (waitPrevious, frameReady):
// the wall clock in production; the gate's test replaces it with one it
// advances itself, so that the waits are checked without sleeping.
type clock interface {
	Now() time.Time
	After(d time.Duration) <-chan time.Time
}

// wallClock is the real time.
type wallClock struct{}

func (wallClock) Now() time.Time                         { return time.Now() }
func (wallClock) After(d time.Duration) <-chan time.Time { return time.After(d) }

// StateKey is the blob key of a series' tracker state after frame n as
// JSON: the form of the stereo series, of workers from before the binary
// state, and of a runner with Config.StateJSON.
func StateKey(seriesID string, n int) string {
	return jobs.SeriesKey(seriesID, fmt.Sprintf("state/%06d.json", n))
}

// BinaryStateKey is the blob key of a series' tracker state after frame n
// in the binary form (series.State.MarshalBinary), which a frame stores
// unless Config.StateJSON is set.
func BinaryStateKey(seriesID string, n int) string {
	return jobs.SeriesKey(seriesID, fmt.Sprintf("state/%06d.bin", n))
}

// stateKeyOf is the key state b after frame n is stored under: by its form.
func stateKeyOf(seriesID string, n int, b []byte) string {
	if series.IsBinaryState(b) {
		return BinaryStateKey(seriesID, n)
	}
	return StateKey(seriesID, n)
}

// ReadState reads the tracker state of a series after frame n, in either
// form (series.DecodeState reads both).
func (s *Runner) ReadState(ctx context.Context, seriesID string, n int) ([]byte, error) {
	b, _, err := s.readState(ctx, seriesID, n)
	return b, err
}

// readState is ReadState that also returns the key read. It looks first
// under the key of the form this runner writes, then under the other,
// where a state stored by an earlier version (or by a worker of the other
// setting) is.
func (s *Runner) readState(ctx context.Context, seriesID string, n int) ([]byte, string, error) {
	keys := [2]string{BinaryStateKey(seriesID, n), StateKey(seriesID, n)}
	if s.cfg.StateJSON {
		keys[0], keys[1] = keys[1], keys[0]
	}
	b, err := s.ReadBlob(ctx, keys[0])
	if errors.Is(err, jobs.ErrNotFound) {
		var err2 error
		if b, err2 = s.ReadBlob(ctx, keys[1]); err2 == nil {
			return b, keys[1], nil
		}
	}
	return b, keys[0], err
}

// lastDone returns the last succeeded frame of j's series before j, or nil
// when there is none: the frame whose tracker state j continues from. It
// reads the records of the frames before j one by one from the nearest,
// usually one read (the frame before j succeeded), and lists the series
// instead (one request for the bucket's state, then the mirror) after
// lastDoneWalk frames that did not succeed, or when a read fails.
func (s *Runner) lastDone(ctx context.Context, j *jobs.Job) (*jobs.Job, error) {
	return s.lastDoneOf(ctx, j, nil)
}

// lastDoneOf is lastDone taking the records in read, by id, as read
// rather than reading them again (those its caller read a moment before).
func (s *Runner) lastDoneOf(ctx context.Context, j *jobs.Job, read map[string]*jobs.Job) (*jobs.Job, error) {
	if sr, err := s.seriesOf(ctx, j); err == nil && j.FrameIndex <= len(sr.Frames) {
		k := j.FrameIndex - 1
		for ; k >= 0 && k >= j.FrameIndex-lastDoneWalk; k-- {
			f, ok := read[sr.Frames[k]]
			var err error
			if !ok {
				f, err = s.store.Job(ctx, sr.Frames[k])
			}
			if errors.Is(err, jobs.ErrNotFound) {
				continue // never accepted: not a frame of the series
			}
			if err != nil {
				break
			}
			if f.State == jobs.Succeeded {
				return f, nil
			}
		}
		if k < 0 {
			return nil, nil
		}
	}
	list, err := s.Frames(ctx, j.Series)
	if err != nil {
		return nil, err
	}
	var last *jobs.Job
	for _, f := range list {
		if f.FrameIndex < j.FrameIndex && f.State == jobs.Succeeded {
			last = f
		}
	}
	return last, nil
}

// lastDoneWalk is how many records of the frames before a frame lastDone
// reads one by one before it lists the series.
const lastDoneWalk = 8

// seriesOf returns the record of j's series, a frame: the one this runner
// read last if it holds j among its frames, else the stored one, which it
// keeps for the next call. The frame gate, solving ahead and adding a
// frame read only what a series record never changes once the frame is
// reserved: the kind, parameters, bound and reference name of the series
// and the ids of the frames before it (a reserved index is given back only
// while it is the last one, so none before a reserved frame changes). The
// record returned is shared: callers do not change it.
func (s *Runner) seriesOf(ctx context.Context, j *jobs.Job) (*jobs.Series, error) {
	if sr := s.seriesRecs.get(j.Series); sr != nil && j.FrameIndex < len(sr.Frames) && sr.Frames[j.FrameIndex] == j.ID {
		return sr, nil
	}
	sr, err := s.store.Series(ctx, j.Series)
	if err != nil {
		return nil, err
	}
	s.seriesRecs.put(sr)
	return sr, nil
}

// maxSeriesRecs bounds the series records a runner keeps (seriesOf).
const maxSeriesRecs = 64

// seriesRecs holds the series records read last, by id.
type seriesRecs struct {
	mu sync.Mutex
	m  map[string]*jobs.Series
}

func (c *seriesRecs) get(id string) *jobs.Series {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.m[id]
}

// put keeps sr, forgetting every other record first when the bound is
// reached (the records are a few KB; the set is refilled from the store).
func (c *seriesRecs) put(sr *jobs.Series) {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.m == nil || len(c.m) >= maxSeriesRecs {
		c.m = map[string]*jobs.Series{}
	}
	c.m[sr.ID] = sr
}

// dropOldState removes the tracker state j was computed from (under key
// from), now that j's own state is stored and j is recorded as done.
func (s *Runner) dropOldState(ctx context.Context, j *jobs.Job, from string) {
	if from == "" {
		return // the first frame
	}
	if err := jobs.DeleteKey(ctx, s.blobs, from); err != nil {
		s.log.Warn("remove old series state", "job", j.ID, "error", err)
	}
}

package runner

import (
	"context"
	"io"
	"log/slog"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service/embedded"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// heldDelivery is a delivery held by the frame gate; the gate only
// sends it heartbeats, which it counts.
type heldDelivery struct {
	id    string
	beats *atomic.Int64
}

func (d heldDelivery) ID() string        { return d.id }
func (d heldDelivery) Ack() error        { return nil }
func (d heldDelivery) Nak() error        { return nil }
func (d heldDelivery) InProgress() error { d.beats.Add(1); return nil }

// stepClock is a clock the test moves: each After call is handed to the
// test on waits (the caller blocks until then), and fire moves the time
// on by the wait and ends it. The gate's waits are thus checked step by
// step, without sleeping and whatever the speed of the machine.
type stepClock struct {
	mu    sync.Mutex
	now   time.Time
	waits chan stepWait
}

type stepWait struct {
	d time.Duration
	c chan time.Time
}

func (c *stepClock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.now
}

func (c *stepClock) After(d time.Duration) <-chan time.Time {
	ch := make(chan time.Time, 1)
	c.waits <- stepWait{d, ch}
	return ch
}

func (c *stepClock) fire(w stepWait) {
	c.mu.Lock()
	c.now = c.now.Add(w.d)
	t := c.now
	c.mu.Unlock()
	w.c <- t
}

// TestFrameGate checks the series order gate: a frame whose predecessor
// runs is held in place until the predecessor finishes, also past
// frameQueuedWait (put back, it would go behind the later frames of its
// series, and each of those would then wait its turn in the gate); a frame
// whose predecessor has not started is put back after frameQueuedWait,
// well before frameWait. The order rule (frame n after frame n−1) is the
// design of the service (DESIGN.md), not a published method.
func TestFrameGate(t *testing.T) {
	be, err := embedded.Open(t.TempDir(), 8)
	if err != nil {
		t.Fatal(err)
	}
	defer be.Close()
	s, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: 1, Logger: slog.New(slog.NewJSONHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	clk := &stepClock{now: time.Now(), waits: make(chan stepWait)}
	s.clock = clk
	ctx := context.Background()
	now := time.Now().UTC()
	ser := &jobs.Series{ID: jobs.NewID(), Params: []byte(`{}`), Width: 8, Height: 8, Created: now, Updated: now}
	ids := []string{jobs.NewID(), jobs.NewID(), jobs.NewID()}
	ser.Frames = ids
	if err := be.Store.CreateSeries(ctx, ser); err != nil {
		t.Fatal(err)
	}
	for i, id := range ids {
		j := &jobs.Job{ID: id, Kind: jobs.Frame, State: jobs.Queued, Series: ser.ID, FrameIndex: i, Created: now}
		if err := be.Store.CreateJob(ctx, j); err != nil {
			t.Fatal(err)
		}
	}
	setState := func(id string, st jobs.State) {
		t.Helper()
		if _, err := be.Store.UpdateJob(ctx, id, func(j *jobs.Job) error { j.State = st; return nil }); err != nil {
			t.Fatal(err)
		}
	}
	setState(ids[0], jobs.Succeeded)

	tests := []struct {
		prev jobs.State // state of frame 1
		want gate       // gate of frame 2
	}{
		{jobs.Queued, gateQueued},
		{jobs.Running, gateRunning},
		{jobs.Failed, gateOpen},
		{jobs.Succeeded, gateOpen},
	}
	for _, tc := range tests {
		setState(ids[1], tc.prev)
		if g := s.frameReady(ctx, ids[2]); g != tc.want {
			t.Errorf("frame 1 %s: gate of frame 2 = %d, want %d", tc.prev, g, tc.want)
		}
	}
	if g := s.frameReady(ctx, ids[1]); g != gateOpen {
		t.Errorf("frame 0 succeeded: gate of frame 1 = %d, want open", g)
	}

	// wait runs waitPrevious for frame 2, moving the clock on at each of
	// its waits until it returns or stop says so; it returns the clock
	// time spent, and the result (nil when it has not returned).
	beats := &atomic.Int64{}
	res := make(chan bool, 1)
	wait := func(stop func(elapsed time.Duration) bool) (time.Duration, *bool) {
		t0 := clk.Now()
		for {
			select {
			case ok := <-res:
				return clk.Now().Sub(t0), &ok
			case w := <-clk.waits:
				if stop(clk.Now().Sub(t0)) {
					// Leave this wait pending: the gate stays blocked in it.
					go func() { clk.waits <- w }()
					return clk.Now().Sub(t0), nil
				}
				clk.fire(w)
			}
		}
	}
	never := func(time.Duration) bool { return false }

	// Predecessor not started: put back after frameQueuedWait, long
	// before frameWait.
	setState(ids[1], jobs.Queued)
	go func() { res <- s.waitPrevious(ctx, ids[2], heldDelivery{ids[2], beats}) }()
	el, ok := wait(never)
	if ok == nil || *ok || el <= frameQueuedWait || el > frameQueuedWait+time.Second {
		t.Errorf("frame 1 queued: waitPrevious returned %v after %v, want false just after %v", ok, el, frameQueuedWait)
	}

	// Predecessor running for longer than frameQueuedWait (three times
	// it): held, with heartbeats, until it finishes.
	setState(ids[1], jobs.Running)
	go func() { res <- s.waitPrevious(ctx, ids[2], heldDelivery{ids[2], beats}) }()
	el, ok = wait(func(el time.Duration) bool { return el > 3*frameQueuedWait })
	if ok != nil {
		t.Fatalf("frame 1 running: waitPrevious returned %v after %v, before frame 1 finished", *ok, el)
	}
	if n := beats.Load(); n < 1 {
		t.Errorf("frame 1 running: %d heartbeats in %v of holding, want at least one", n, el)
	}
	setState(ids[1], jobs.Succeeded)
	if _, ok := wait(never); ok == nil || !*ok {
		t.Error("frame 1 finished: waitPrevious put frame 2 back, want it to run")
	}

	// Predecessor running past frameWait (its worker may have died): put
	// back then.
	setState(ids[1], jobs.Running)
	go func() { res <- s.waitPrevious(ctx, ids[2], heldDelivery{ids[2], beats}) }()
	if el, ok := wait(never); ok == nil || *ok || el <= frameWait || el > frameWait+time.Second {
		t.Errorf("frame 1 running for ever: waitPrevious returned %v after %v, want false just after %v", ok, el, frameWait)
	}
}

// TestWakes checks which finished frames wake a held frame (framesDone):
// its predecessor, and the frame the in-flight bound waits for, nothing
// else (the service's design, issue 21, not a published method).
func TestWakes(t *testing.T) {
	frame := func(n int, st jobs.State) *jobs.Job { return &jobs.Job{Kind: jobs.Frame, FrameIndex: n, State: st} }
	for _, c := range []struct {
		name     string
		f        *jobs.Job
		n, bound int
		want     bool
	}{
		{"predecessor succeeded", frame(4, jobs.Succeeded), 5, 1, true},
		{"predecessor failed", frame(4, jobs.Failed), 5, 3, true},
		{"predecessor running", frame(4, jobs.Running), 5, 3, false},
		{"frame n-bound finished", frame(2, jobs.Succeeded), 5, 3, true},
		{"between n-bound and n-1", frame(3, jobs.Succeeded), 5, 3, false},
		{"before n-bound", frame(1, jobs.Succeeded), 5, 3, false},
		{"earlier frame, one in flight", frame(3, jobs.Succeeded), 5, 1, false},
		{"later frame", frame(6, jobs.Succeeded), 5, 3, false},
		{"the frame itself", frame(5, jobs.Succeeded), 5, 3, false},
		{"bound beyond the start", frame(0, jobs.Succeeded), 2, 8, false},
		{"not a frame", &jobs.Job{Kind: jobs.Analysis, FrameIndex: 4, State: jobs.Succeeded}, 5, 1, false},
	} {
		if got := wakes(c.f, c.n, c.bound); got != c.want {
			t.Errorf("%s: wakes = %v, want %v", c.name, got, c.want)
		}
	}
}

// countingStore counts the reads of single records.
type countingStore struct {
	jobs.Store
	series, job atomic.Int64
}

func (c *countingStore) Series(ctx context.Context, id string) (*jobs.Series, error) {
	c.series.Add(1)
	return c.Store.Series(ctx, id)
}

func (c *countingStore) Job(ctx context.Context, id string) (*jobs.Job, error) {
	c.job.Add(1)
	return c.Store.Job(ctx, id)
}

// TestSeriesOf checks the series records the runner keeps (seriesOf): a
// record holding the frame is used again without a read; one that does
// not (a frame reserved after it was read, or an index given back and
// reserved again by another frame) is read anew.
func TestSeriesOf(t *testing.T) {
	be, err := embedded.Open(t.TempDir(), 8)
	if err != nil {
		t.Fatal(err)
	}
	defer be.Close()
	s, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: 1, Logger: slog.New(slog.NewJSONHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	cs := &countingStore{Store: be.Store}
	s.store = cs
	ctx := context.Background()
	now := time.Now().UTC()
	a, x, y := jobs.NewID(), jobs.NewID(), jobs.NewID()
	ser := &jobs.Series{ID: jobs.NewID(), Params: []byte(`{}`), Width: 8, Height: 8, Created: now, Updated: now, Frames: []string{a}}
	if err := be.Store.CreateSeries(ctx, ser); err != nil {
		t.Fatal(err)
	}
	frame := func(id string, n int) *jobs.Job {
		return &jobs.Job{ID: id, Kind: jobs.Frame, Series: ser.ID, FrameIndex: n}
	}
	look := func(j *jobs.Job, reads int64, what string) {
		t.Helper()
		before := cs.series.Load()
		sr, err := s.seriesOf(ctx, j)
		if err != nil {
			t.Fatal(err)
		}
		if got := cs.series.Load() - before; got != reads {
			t.Errorf("%s: %d reads of the record, want %d", what, got, reads)
		}
		if j.FrameIndex >= len(sr.Frames) || sr.Frames[j.FrameIndex] != j.ID {
			t.Errorf("%s: the record has frames %v, not frame %d %s", what, sr.Frames, j.FrameIndex, j.ID)
		}
	}
	reserve := func(id string) {
		t.Helper()
		if _, err := be.Store.UpdateSeries(ctx, ser.ID, func(sr *jobs.Series) error { sr.Frames = append(sr.Frames, id); return nil }); err != nil {
			t.Fatal(err)
		}
	}
	look(frame(a, 0), 1, "first look")
	look(frame(a, 0), 0, "second look")
	reserve(x)
	look(frame(x, 1), 1, "a frame reserved after the record was read")
	look(frame(x, 1), 0, "that frame again")
	// x's index is given back (its job was not accepted) and y takes it.
	if _, err := be.Store.UpdateSeries(ctx, ser.ID, func(sr *jobs.Series) error { sr.Frames = sr.Frames[:1]; return nil }); err != nil {
		t.Fatal(err)
	}
	reserve(y)
	look(frame(y, 1), 1, "another frame at an index given back")
	look(frame(a, 0), 0, "an earlier frame")
}

// TestLastDone checks which frame a frame continues from: the last one
// before it that succeeded, skipping failed, canceled and never-stored
// frames, found by reading the records from the nearest (one read when
// the frame before succeeded), and by the listing of the series beyond
// lastDoneWalk frames, with the same answer.
func TestLastDone(t *testing.T) {
	be, err := embedded.Open(t.TempDir(), 8)
	if err != nil {
		t.Fatal(err)
	}
	defer be.Close()
	s, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: 1, Logger: slog.New(slog.NewJSONHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	cs := &countingStore{Store: be.Store}
	s.store = cs
	ctx := context.Background()
	now := time.Now().UTC()
	n := lastDoneWalk + 6
	ids := make([]string, n)
	for i := range ids {
		ids[i] = jobs.NewID()
	}
	ser := &jobs.Series{ID: jobs.NewID(), Params: []byte(`{}`), Width: 8, Height: 8, Created: now, Updated: now, Frames: ids}
	if err := be.Store.CreateSeries(ctx, ser); err != nil {
		t.Fatal(err)
	}
	// Frames 0 and 1 succeeded, 2 failed, 3 was never stored, 4 canceled,
	// 5 succeeded, then every frame failed up to the last, which asks.
	states := map[int]jobs.State{0: jobs.Succeeded, 1: jobs.Succeeded, 2: jobs.Failed, 4: jobs.Canceled, 5: jobs.Succeeded}
	for i, id := range ids {
		st, ok := states[i]
		if !ok {
			st = jobs.Failed
		}
		if i == 3 {
			continue
		}
		if i == n-1 {
			st = jobs.Queued
		}
		if err := be.Store.CreateJob(ctx, &jobs.Job{ID: id, Kind: jobs.Frame, State: st, Series: ser.ID, FrameIndex: i, Created: now}); err != nil {
			t.Fatal(err)
		}
	}
	ask := func(i int) *jobs.Job { return &jobs.Job{ID: ids[i], Kind: jobs.Frame, Series: ser.ID, FrameIndex: i} }
	for _, c := range []struct {
		frame, want int // want −1: none
		reads       int64
	}{
		{0, -1, 0}, {1, 0, 1}, {2, 1, 1}, {3, 1, 2}, {5, 1, 4}, {6, 5, 1}, {n - 1, 5, lastDoneWalk},
	} {
		before := cs.job.Load()
		got, err := s.lastDone(ctx, ask(c.frame))
		if err != nil {
			t.Fatal(err)
		}
		reads := cs.job.Load() - before
		switch {
		case c.want < 0 && got != nil, c.want >= 0 && (got == nil || got.ID != ids[c.want]):
			t.Errorf("frame %d continues from %+v, want frame %d", c.frame, got, c.want)
		case reads != c.reads:
			t.Errorf("frame %d: %d record reads, want %d", c.frame, reads, c.reads)
		}
	}
}

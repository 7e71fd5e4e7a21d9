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

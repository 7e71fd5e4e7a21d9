package runner

import (
	"bytes"
	"context"
	"encoding/json"
	"io"
	"log/slog"
	"math"
	"runtime"
	"sync"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/service/embedded"
	"github.com/mottledic/mottle/pkg/service/jobs"
	"github.com/mottledic/mottle/pkg/synth"
)

// counting wraps Pipeline and records how many frames of the series are
// computed at once (solved ahead or added to the state).
type counting struct {
	Pipeline
	mu       sync.Mutex
	now, max int
	solves   int
}

func (c *counting) enter(solve bool) func() {
	c.mu.Lock()
	c.now++
	c.max = max(c.max, c.now)
	if solve {
		c.solves++
	}
	c.mu.Unlock()
	return func() { c.mu.Lock(); c.now--; c.mu.Unlock() }
}

func (c *counting) Frame(ctx context.Context, in FrameInput) (*Result, error) {
	defer c.enter(false)()
	return c.Pipeline.Frame(ctx, in)
}

func (c *counting) Solve(ctx context.Context, in SolveInput) ([]byte, error) {
	defer c.enter(true)()
	return c.Pipeline.Solve(ctx, in)
}

// aheadSeries renders a direct-mode series (a strip stretched and shifted
// a little more in each frame) with the exact renderer of pkg/synth.
func aheadSeries(t *testing.T, n int) (*imageio.Gray, []*imageio.Gray, series.Params) {
	return aheadSeriesSize(t, n, 128)
}

// aheadSeriesSize is aheadSeries on W×(3W/4) px frames.
func aheadSeriesSize(t testing.TB, n, W int) (*imageio.Gray, []*imageio.Gray, series.Params) {
	t.Helper()
	H := 3 * W / 4
	all := []synth.Motion{synth.Identity{}}
	for k := 1; k <= n; k++ {
		e := 0.004 * float64(k)
		all = append(all, synth.Affine{F: [2][2]float64{{1 + e, 0}, {0, 1 - 0.3*e}}, CX: float64(W) / 2, CY: float64(H) / 2, U: 0.7 * float64(k), V: -0.2 * float64(k)})
	}
	var fr []synth.Frame
	for _, m := range all {
		fr = append(fr, synth.Frame{Motion: m})
	}
	pat, err := synth.NewPattern(synth.PatternOptions{Diameter: 4, Seed: 5, Bounds: synth.BoundsForSeries(fr, W, H, 12)})
	if err != nil {
		t.Fatal(err)
	}
	var imgs []*imageio.Gray
	for _, m := range all {
		g, _, err := synth.Render(pat, m, synth.RenderOptions{W: W, H: H, Bits: 8, Supersample: 2})
		if err != nil {
			t.Fatal(err)
		}
		imgs = append(imgs, g)
	}
	p := series.Defaults()
	p.Analysis.Subset, p.Analysis.Step = 21, 8
	p.Incremental = series.IncrementalNever
	p.Extensometers = []series.Extensometer{{Name: "axial", A: [2]float64{24, 48}, B: [2]float64{104, 48}}}
	return imgs[0], imgs[1:], p
}

func png(t testing.TB, g *imageio.Gray) []byte {
	t.Helper()
	var b bytes.Buffer
	if err := imageio.WritePNG(&b, g, 8); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// TestFramesInFlight runs one direct-mode series on three workers with at
// most three frames in flight (issue 21), holding the first frame until
// two later frames are solved ahead, and checks: every frame succeeds, at
// most MaxInFlight frames are computed at once, the state holds each frame
// once and in order, and its curve is the sequential run's within the
// bound of package series (2e-3 px, 2e-5 strain; see series.TestSolveAhead
// for its source).
func TestFramesInFlight(t *testing.T) {
	const nFrames, limit = 6, 3
	ref, imgs, p := aheadSeries(t, nFrames)
	be, err := embedded.Open(t.TempDir(), 64)
	if err != nil {
		t.Fatal(err)
	}
	defer be.Close()
	ctx := context.Background()
	an := &counting{}
	release := make(chan struct{})
	var held sync.Once
	rn, err := New(Config{Backend: be, Analyzer: an, Workers: 3, Logger: slog.New(slog.NewJSONHandler(io.Discard, nil)),
		BeforeCompute: func(ctx context.Context, j jobs.Job) {
			if j.FrameIndex == 0 {
				held.Do(func() {
					select {
					case <-release:
					case <-ctx.Done():
					case <-time.After(time.Minute):
					}
				})
			}
		}})
	if err != nil {
		t.Fatal(err)
	}
	sr, ids := submitSeries(t, be, ref, imgs, p, limit)
	stop, err := rn.Start(ctx)
	if err != nil {
		t.Fatal(err)
	}
	defer stop()

	deadline := time.Now().Add(2 * time.Minute)
	for rn.Stats().SolvedAhead < 2 && time.Now().Before(deadline) {
		time.Sleep(10 * time.Millisecond)
	}
	if n := rn.Stats().SolvedAhead; n < 2 {
		t.Errorf("%d frames solved ahead while frame 0 was held, want at least 2", n)
	}
	close(release)
	var last *jobs.Job
	for time.Now().Before(deadline) {
		if last, err = be.Store.Job(ctx, ids[nFrames-1]); err == nil && last.State.Terminal() {
			break
		}
		time.Sleep(20 * time.Millisecond)
	}
	an.mu.Lock()
	mx := an.max
	an.mu.Unlock()
	if mx > limit {
		t.Errorf("%d frames of the series computed at once, bound %d", mx, limit)
	}
	checkSeries(t, seriesState(t, rn, sr.ID, nFrames), ref, imgs, p, be, ids)
	if _, err := be.Blobs.Get(ctx, SolveKey(sr.ID, 1)); err == nil {
		t.Errorf("the solution of frame 1 is kept after the frame was added")
	}
}

// submitSeries stores a series of frames with the given bound on frames
// in flight in the backend, as the service does. The runner's Start
// queues them (Backend.Recover, as after a restart): queued here too,
// each would be delivered twice.
func submitSeries(t testing.TB, be *jobs.Backend, ref *imageio.Gray, imgs []*imageio.Gray, p series.Params, limit int) (*jobs.Series, []string) {
	t.Helper()
	ctx := context.Background()
	params, err := p.FlatJSON()
	if err != nil {
		t.Fatal(err)
	}
	now := time.Now().UTC()
	sr := &jobs.Series{ID: jobs.NewID(), Params: params, Width: ref.W, Height: ref.H, Created: now, Updated: now, MaxInFlight: limit}
	if err := be.Blobs.Put(ctx, jobs.SeriesKey(sr.ID, "reference"), bytes.NewReader(png(t, ref))); err != nil {
		t.Fatal(err)
	}
	var ids []string
	for _, im := range imgs {
		id := jobs.NewID()
		ids = append(ids, id)
		if err := be.Blobs.Put(ctx, jobs.InputKey(id, "deformed"), bytes.NewReader(png(t, im))); err != nil {
			t.Fatal(err)
		}
	}
	sr.Frames = ids
	if err := be.Store.CreateSeries(ctx, sr); err != nil {
		t.Fatal(err)
	}
	for k, id := range ids {
		j := &jobs.Job{ID: id, Kind: jobs.Frame, State: jobs.Queued, Params: params, Width: ref.W, Height: ref.H, Series: sr.ID, FrameIndex: k,
			Created: now.Add(time.Duration(k) * time.Millisecond)} // uploaded in frame order
		if err := be.Store.CreateJob(ctx, j); err != nil {
			t.Fatal(err)
		}
	}
	return sr, ids
}

// TestFramesInFlightRestart stops the runner (as a worker process is
// stopped) while a series with frames solved ahead is being added, and
// finishes it with a new runner on the reopened backend: every frame
// succeeds, the state holds each frame once and in order, and the curve
// is the sequential run's within the bound of TestFramesInFlight.
func TestFramesInFlightRestart(t *testing.T) {
	const nFrames, limit = 5, 3
	ref, imgs, p := aheadSeries(t, nFrames)
	dir := t.TempDir()
	be, err := embedded.Open(dir, 64)
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	sr, ids := submitSeries(t, be, ref, imgs, p, limit)
	atTwo := make(chan struct{})
	var once sync.Once
	quiet := slog.New(slog.NewJSONHandler(io.Discard, nil))
	r1, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: 2, Logger: quiet, ShutdownGrace: 10 * time.Millisecond,
		BeforeCompute: func(ctx context.Context, j jobs.Job) {
			if j.FrameIndex == 2 {
				once.Do(func() { close(atTwo) })
				select { // held until the runner is stopped
				case <-ctx.Done():
				case <-time.After(time.Minute):
				}
			}
		}})
	if err != nil {
		t.Fatal(err)
	}
	stop1, err := r1.Start(ctx)
	if err != nil {
		t.Fatal(err)
	}
	select {
	case <-atTwo:
	case <-time.After(2 * time.Minute):
		t.Fatal("frame 2 did not start within 2 minutes")
	}
	stop1()
	be.Close()

	if be, err = embedded.Open(dir, 64); err != nil {
		t.Fatal(err)
	}
	defer be.Close()
	r2, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: 2, Logger: quiet})
	if err != nil {
		t.Fatal(err)
	}
	stop2, err := r2.Start(ctx)
	if err != nil {
		t.Fatal(err)
	}
	defer stop2()
	deadline := time.Now().Add(2 * time.Minute)
	for time.Now().Before(deadline) {
		if j, err := be.Store.Job(ctx, ids[nFrames-1]); err == nil && j.State.Terminal() {
			break
		}
		time.Sleep(20 * time.Millisecond)
	}
	checkSeries(t, seriesState(t, r2, sr.ID, nFrames), ref, imgs, p, be, ids)
}

func seriesState(t *testing.T, rn *Runner, id string, n int) series.State {
	t.Helper()
	b, err := rn.ReadBlob(context.Background(), BinaryStateKey(id, n-1))
	if err != nil {
		t.Fatal(err)
	}
	// A frame added from its solution stores a state that names it.
	st, err := series.DecodeStateWith(b, func() ([]byte, error) { return rn.ReadBlob(context.Background(), SolveKey(id, n-1)) })
	if err != nil {
		t.Fatal(err)
	}
	return st
}

// checkSeries checks that every frame succeeded, that the state holds
// each frame once and in order, and that its curve is the sequential
// run's within 2e-3 px and 2e-5 strain.
func checkSeries(t *testing.T, st series.State, ref *imageio.Gray, imgs []*imageio.Gray, p series.Params, be *jobs.Backend, ids []string) {
	t.Helper()
	ctx := context.Background()
	for k, id := range ids {
		j, err := be.Store.Job(ctx, id)
		if err != nil || j.State != jobs.Succeeded {
			t.Fatalf("frame %d: %v %+v", k, err, j)
		}
	}
	got := series.CurveOf(st)
	if len(got.Rows) != len(imgs)+1 {
		t.Fatalf("state has %d curve rows, want %d (each frame once)", len(got.Rows), len(imgs)+1)
	}
	for i, r := range got.Rows {
		if r.Index != i {
			t.Errorf("curve row %d has index %d: frames out of order or repeated", i, r.Index)
		}
	}
	seq, err := series.New(ref, series.FrameMeta{Name: "reference"}, p)
	if err != nil {
		t.Fatal(err)
	}
	for _, im := range imgs {
		if _, err := seq.Add(ctx, im, series.FrameMeta{}); err != nil {
			t.Fatal(err)
		}
	}
	want := seq.Curve()
	for i := range want.Rows {
		for _, q := range series.MeanNames {
			d := math.Abs(got.Rows[i].Mean[q] - want.Rows[i].Mean[q])
			bound := 2e-5
			if q == "u" || q == "v" {
				bound = 2e-3
			}
			if d > bound {
				t.Errorf("frame %d %s: %g, sequential %g (bound %g)", i, q, got.Rows[i].Mean[q], want.Rows[i].Mean[q], bound)
			}
		}
	}
}

// chained is a delayed FrameSolver whose frames all go incremental, and
// whose parameters split an incremental chain (a frame may return to
// direct correlation) when split is set.
type chained struct {
	delayed
	split bool
}

func (c chained) Frame(ctx context.Context, in FrameInput) (*Result, error) {
	r, err := c.delayed.Frame(ctx, in)
	if err == nil {
		r.Summary.Mode = series.ModeIncremental
	}
	return r, err
}

func (c chained) SolvesAhead(_ json.RawMessage, incremental bool) (bool, error) {
	return !incremental || c.split, nil
}

// TestSolveAheadAfterIncremental checks the runner's rule for a series
// that went incremental (issue 21): its frames chain one by one (none is
// solved ahead once a frame finished incremental, at most frame 1 before
// that), unless its parameters split the chain at a frame that returns to
// direct correlation; then the frames after the incremental ones are
// solved ahead as in direct mode, within the bound on frames in flight.
func TestSolveAheadAfterIncremental(t *testing.T) {
	const n = 8
	d := delayed{solve: 60 * time.Millisecond, add: 20 * time.Millisecond}
	_, chain := runSimulatedStats(t, chained{delayed: d}, n, 2, 2)
	if chain.SolvedAhead > 1 {
		t.Errorf("%d frames of an incremental chain solved ahead, want at most frame 1 (before a frame finished)", chain.SolvedAhead)
	}
	_, split := runSimulatedStats(t, chained{delayed: d, split: true}, n, 2, 2)
	if split.SolvedAhead < n/2 {
		t.Errorf("%d of %d frames solved ahead with the chain split at returns to direct, want at least %d", split.SolvedAhead, n, n/2)
	}
}

// tagged is a delayed FrameSolver that records, by series (its parameter
// document), how many frames are computed at once at most and when each
// frame was added to its series.
type tagged struct {
	delayed
	mu    sync.Mutex
	now   map[string]int
	peak  map[string]int
	added map[string][]time.Time
}

func (c *tagged) enter(series string) func() {
	c.mu.Lock()
	c.now[series]++
	c.peak[series] = max(c.peak[series], c.now[series])
	c.mu.Unlock()
	return func() { c.mu.Lock(); c.now[series]--; c.mu.Unlock() }
}

func (c *tagged) Frame(ctx context.Context, in FrameInput) (*Result, error) {
	defer c.enter(string(in.Params))()
	r, err := c.delayed.Frame(ctx, in)
	if err == nil {
		c.mu.Lock()
		c.added[string(in.Params)] = append(c.added[string(in.Params)], time.Now())
		c.mu.Unlock()
	}
	return r, err
}

func (c *tagged) Solve(ctx context.Context, in SolveInput) ([]byte, error) {
	defer c.enter(string(in.Params))()
	return c.delayed.Solve(ctx, in)
}

// TestSeriesShareWorkers checks the sharing of workers between series
// (issue 21): two series of 12 frames, each allowed 2 frames in flight,
// the second created after the first (so every frame of the first is
// ahead of it in the queue), on 4 workers. Neither series ever has more
// than 2 frames computed at once (solved ahead or added), and the second
// is not kept waiting for the first: its first half is added before the
// first series' last frame.
func TestSeriesShareWorkers(t *testing.T) {
	const n, bound = 12, 2
	be, err := embedded.Open(t.TempDir(), 64)
	if err != nil {
		t.Fatal(err)
	}
	defer be.Close()
	t0 := time.Now().UTC()
	a := simSeries(t, be, n, bound, []byte(`{"series":"a"}`), t0)
	b := simSeries(t, be, n, bound, []byte(`{"series":"b"}`), t0.Add(time.Second))
	an := &tagged{delayed: delayed{solve: 80 * time.Millisecond, add: 10 * time.Millisecond},
		now: map[string]int{}, peak: map[string]int{}, added: map[string][]time.Time{}}
	rn, err := New(Config{Backend: be, Analyzer: an, Workers: 4, Logger: slog.New(slog.NewJSONHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	stop, err := rn.Start(ctx)
	if err != nil {
		t.Fatal(err)
	}
	defer stop()
	finished := func(sr *jobs.Series) bool {
		j, err := be.Store.Job(ctx, sr.Frames[n-1])
		return err == nil && j.State.Terminal()
	}
	for end := time.Now().Add(2 * time.Minute); !(finished(a) && finished(b)); time.Sleep(5 * time.Millisecond) {
		if time.Now().After(end) {
			t.Fatal("the two series did not finish within 2 minutes")
		}
	}
	an.mu.Lock()
	defer an.mu.Unlock()
	for _, sr := range []*jobs.Series{a, b} {
		tag := string(sr.Params)
		if p := an.peak[tag]; p > bound {
			t.Errorf("series %s: %d frames computed at once, bound %d", tag, p, bound)
		}
		if len(an.added[tag]) != n {
			t.Fatalf("series %s: %d frames added, want %d", tag, len(an.added[tag]), n)
		}
	}
	ta, tb := an.added[string(a.Params)], an.added[string(b.Params)]
	if !tb[n/2-1].Before(ta[n-1]) {
		t.Errorf("the second series added its frame %d %v after the first series' last; it waited for the first series", n/2, tb[n/2-1].Sub(ta[n-1]))
	}
}

// seedSolver is Pipeline solving every frame ahead from the seed search,
// whatever guess the runner gives it, as a worker that found no guess
// would: its solution of a frame is another, equally good, than one from
// the state before.
// The last solution is kept in *out.
type seedSolver struct {
	Pipeline
	out *[]byte
}

func (a seedSolver) Solve(ctx context.Context, in SolveInput) ([]byte, error) {
	in.Guess, in.GuessState, in.GuessBefore = nil, nil, nil
	b, err := a.Pipeline.Solve(ctx, in)
	*a.out = b
	return b, err
}

// plainDelivery is a delivery handed to runJob by a test.
type plainDelivery string

func (d plainDelivery) ID() string        { return string(d) }
func (d plainDelivery) Ack() error        { return nil }
func (d plainDelivery) Nak() error        { return nil }
func (d plainDelivery) InProgress() error { return nil }

// TestSolutionNotReplaced runs the interleaving that lost a series when
// solutions were stored with Put (issue 21): worker A solves frame 1
// ahead and stalls before it stores its solution (its delivery runs out);
// worker B then solves frame 1, stores its solution and adds the frame,
// whose state names B's solution; then A goes on and stores its own, from
// another guess. The state must still find the solution it names: A's is
// refused, B's kept, and frame 2 continues the series (with Put, A's
// replaced B's and frame 2 failed: "the frame's solution is not the one
// the state was made from").
func TestSolutionNotReplaced(t *testing.T) {
	ref, imgs, p := aheadSeries(t, 3)
	be, err := embedded.Open(t.TempDir(), 8)
	if err != nil {
		t.Fatal(err)
	}
	defer be.Close()
	ctx := context.Background()
	logger := slog.New(slog.NewJSONHandler(io.Discard, nil))
	stalled, release := make(chan struct{}), make(chan struct{})
	var theirs []byte
	a, err := New(Config{Backend: be, Analyzer: seedSolver{out: &theirs}, Workers: 1, Logger: logger,
		beforeSolutionStore: func(jobs.Job) {
			close(stalled)
			select {
			case <-release:
			case <-time.After(time.Minute):
			}
		}})
	if err != nil {
		t.Fatal(err)
	}
	b, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: 1, Logger: logger})
	if err != nil {
		t.Fatal(err)
	}
	sr, ids := submitSeries(t, be, ref, imgs, p, 3)
	b.runJob(ctx, plainDelivery(ids[0]))
	frame := func(k int) *jobs.Job {
		t.Helper()
		j, err := be.Store.Job(ctx, ids[k])
		if err != nil {
			t.Fatal(err)
		}
		return j
	}
	j1 := frame(1)
	aDone := make(chan bool)
	go func() { aDone <- a.solveAhead(ctx, j1, nil, plainDelivery(ids[1])) }()
	select {
	case <-stalled:
	case <-time.After(time.Minute):
		t.Fatal("worker A did not solve frame 1")
	}
	if !b.solveAhead(ctx, frame(1), nil, plainDelivery(ids[1])) {
		t.Fatal("worker B did not solve frame 1 ahead")
	}
	mine, err := b.ReadBlob(ctx, SolveKey(sr.ID, 1))
	if err != nil {
		t.Fatal(err)
	}
	if bytes.Equal(theirs, mine) {
		t.Fatal("the two workers' solutions of frame 1 are the same: nothing to test")
	}
	b.runJob(ctx, plainDelivery(ids[1]))
	st1, err := b.ReadBlob(ctx, BinaryStateKey(sr.ID, 1))
	if err != nil || !series.StateRefersSolution(st1) {
		t.Fatalf("frame 1's state does not name its solution (%v): nothing to test", err)
	}
	close(release)
	if <-aDone {
		t.Error("worker A stored its solution of frame 1 after B's")
	}
	if got, err := b.ReadBlob(ctx, SolveKey(sr.ID, 1)); err != nil || !bytes.Equal(got, mine) {
		t.Errorf("the solution of frame 1 is not the one its state was made from (%v)", err)
	}
	b.runJob(ctx, plainDelivery(ids[2]))
	if j := frame(2); j.State != jobs.Succeeded {
		t.Fatalf("frame 2 after the stalled worker: %s %+v", j.State, j.Error)
	}
	checkSeries(t, seriesState(t, b, sr.ID, 3), ref, imgs, p, be, ids)
}

// TestRepeatAfterStateFindsSolution: each frame of a series is solved
// ahead, then added by a worker that stops once the frame's state is
// stored, before its record says so (a crash); the frame, put back in the
// queue as after a restart (Backend.Recover), is added again from the
// state before. It must find the solution it was added from the first
// time, and store the same state; the next frame, whose start is a state
// that names the solution of the frame before, must find that one too.
func TestRepeatAfterStateFindsSolution(t *testing.T) {
	const nFrames = 4
	ref, imgs, p := aheadSeries(t, nFrames)
	be, err := embedded.Open(t.TempDir(), 8)
	if err != nil {
		t.Fatal(err)
	}
	defer be.Close()
	ctx := context.Background()
	logger := slog.New(slog.NewJSONHandler(io.Discard, nil))
	b, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: 1, Logger: logger})
	if err != nil {
		t.Fatal(err)
	}
	crashing, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: 1, Logger: logger,
		afterState: func(jobs.Job) { runtime.Goexit() }})
	if err != nil {
		t.Fatal(err)
	}
	sr, ids := submitSeries(t, be, ref, imgs, p, 3)
	b.runJob(ctx, plainDelivery(ids[0]))
	for k := 1; k < nFrames; k++ {
		j, err := be.Store.Job(ctx, ids[k])
		if err != nil {
			t.Fatal(err)
		}
		if !b.solveAhead(ctx, j, nil, plainDelivery(ids[k])) {
			t.Fatalf("frame %d not solved ahead", k)
		}
		stopped := make(chan struct{})
		go func() {
			defer close(stopped)
			crashing.runJob(ctx, plainDelivery(ids[k]))
		}()
		<-stopped
		first, err := b.ReadBlob(ctx, BinaryStateKey(sr.ID, k))
		if err != nil || !series.StateRefersSolution(first) {
			t.Fatalf("frame %d: the state stored before the crash does not name its solution (%v)", k, err)
		}
		if j, _ := be.Store.Job(ctx, ids[k]); j.State != jobs.Running {
			t.Fatalf("frame %d after the crash: %s, want running", k, j.State)
		}
		if _, err := be.Recover(ctx); err != nil {
			t.Fatal(err)
		}
		b.runJob(ctx, plainDelivery(ids[k]))
		if j, _ := be.Store.Job(ctx, ids[k]); j.State != jobs.Succeeded {
			t.Fatalf("frame %d repeated: %s %+v", k, j.State, j.Error)
		}
		again, err := b.ReadBlob(ctx, BinaryStateKey(sr.ID, k))
		if err != nil || !bytes.Equal(again, first) {
			t.Errorf("frame %d repeated stored another state than before the crash (%v)", k, err)
		}
	}
	checkSeries(t, seriesState(t, b, sr.ID, nFrames), ref, imgs, p, be, ids)
}

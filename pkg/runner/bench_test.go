package runner

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service/embedded"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// delayed is a FrameSolver whose compute is stood in by sleeps: a frame
// solved ahead takes solve, its addition to the state from the solution
// add, and a frame computed in its turn without a solution solve+add.
// Many such workers share this machine's cores without loading them, so
// the benchmark shows what the runner's hand-over costs (queue, store,
// the frame gate's polling) do to the throughput of one series as the
// workers grow, as a larger cluster would see it.
type delayed struct {
	solve, add time.Duration
}

func (d delayed) Run(ctx context.Context, in Input, progress func(done, total int)) (*Result, error) {
	return nil, fmt.Errorf("delayed: not an analysis")
}

func (d delayed) Map(ctx context.Context, open func(name string) (io.ReadCloser, error), req MapRequest, bg *imageio.Gray) ([]byte, error) {
	return nil, fmt.Errorf("delayed: no maps")
}

func sleep(ctx context.Context, d time.Duration) error {
	select {
	case <-ctx.Done():
		return ctx.Err()
	case <-time.After(d):
		return nil
	}
}

func (d delayed) Frame(ctx context.Context, in FrameInput) (*Result, error) {
	w := d.add
	if in.Solved == nil {
		w += d.solve
	}
	if err := sleep(ctx, w); err != nil {
		return nil, err
	}
	n := 0
	if in.State != nil {
		_ = json.Unmarshal(in.State, &n)
	}
	st, _ := json.Marshal(n + 1)
	return &Result{Files: map[string][]byte{"field.json": []byte("{}")}, Summary: jobs.Summary{Points: 1, Valid: 1}, State: st}, nil
}

func (d delayed) SolvesAhead(json.RawMessage, bool) (bool, error) { return true, nil }

func (d delayed) Solve(ctx context.Context, in SolveInput) ([]byte, error) {
	if err := sleep(ctx, d.solve); err != nil {
		return nil, err
	}
	return []byte("{}"), nil
}

// runSimulated runs one series of n frames through a runner of w workers
// on the embedded backend with at most inFlight frames in flight and
// returns the frames per second.
func runSimulated(b testing.TB, an FrameSolver, n, w, inFlight int) float64 {
	r, _ := runSimulatedStats(b, an, n, w, inFlight)
	return r
}

// simSeries stores a series of n frames of a 16×16 px image with the
// parameter document params, created at t0 and its frames uploaded in
// order 1 ms apart, and returns its record. The runner's Start queues
// the frames (Backend.Recover): queued here too, each would be
// delivered twice.
func simSeries(b testing.TB, be *jobs.Backend, n, inFlight int, params []byte, t0 time.Time) *jobs.Series {
	b.Helper()
	ctx := context.Background()
	img := imageio.NewGray(16, 16)
	for i := range img.Pix {
		img.Pix[i] = float32(i * 37 % 251)
	}
	var pb bytesBuffer
	if err := imageio.WritePNG(&pb, img, 8); err != nil {
		b.Fatal(err)
	}
	sr := &jobs.Series{ID: jobs.NewID(), Params: params, Width: 16, Height: 16, Created: t0, Updated: t0, MaxInFlight: inFlight}
	if err := be.Blobs.Put(ctx, jobs.SeriesKey(sr.ID, "reference"), pb.reader()); err != nil {
		b.Fatal(err)
	}
	for k := 0; k < n; k++ {
		id := jobs.NewID()
		sr.Frames = append(sr.Frames, id)
		if err := be.Blobs.Put(ctx, jobs.InputKey(id, "deformed"), pb.reader()); err != nil {
			b.Fatal(err)
		}
	}
	if err := be.Store.CreateSeries(ctx, sr); err != nil {
		b.Fatal(err)
	}
	for k, id := range sr.Frames {
		j := &jobs.Job{ID: id, Kind: jobs.Frame, State: jobs.Queued, Params: sr.Params, Width: 16, Height: 16, Series: sr.ID, FrameIndex: k,
			Created: t0.Add(time.Duration(k+1) * time.Millisecond)}
		if err := be.Store.CreateJob(ctx, j); err != nil {
			b.Fatal(err)
		}
	}
	return sr
}

// runSimulatedStats is runSimulated that also returns the runner's Stats.
func runSimulatedStats(b testing.TB, an FrameSolver, n, w, inFlight int) (float64, Stats) {
	be, err := embedded.Open(b.TempDir(), 4*n)
	if err != nil {
		b.Fatal(err)
	}
	defer be.Close()
	ctx := context.Background()
	sr := simSeries(b, be, n, inFlight, []byte(`{}`), time.Now().UTC())
	rn, err := New(Config{Backend: be, Analyzer: an, Workers: w, Logger: slog.New(slog.NewJSONHandler(io.Discard, nil))})
	if err != nil {
		b.Fatal(err)
	}
	start := time.Now()
	stop, err := rn.Start(ctx)
	if err != nil {
		b.Fatal(err)
	}
	defer stop()
	last := sr.Frames[n-1]
	for deadline := start.Add(2 * time.Minute); time.Now().Before(deadline); time.Sleep(2 * time.Millisecond) {
		if j, err := be.Store.Job(ctx, last); err == nil && j.State.Terminal() {
			if j.State != jobs.Succeeded {
				b.Fatalf("last frame %s: %+v", j.State, j.Error)
			}
			return float64(n) / time.Since(start).Seconds(), rn.Stats()
		}
	}
	b.Fatal("the series did not finish within 2 minutes")
	return 0, Stats{}
}

// BenchmarkSimulatedCluster shows how the throughput of one series grows
// with the workers when compute is stood in by a delay (solve 200 ms, add
// to the state 10 ms per frame: a 512×512 frame's proportions, measured
// by BenchmarkClusterSeries), up to 16 workers with as many frames in
// flight, against the one-at-a-time rule (frames in flight 1) and one
// worker in the same run. Run with
//
//	go test -run '^$' -bench SimulatedCluster -benchtime 1x ./pkg/runner
func BenchmarkSimulatedCluster(b *testing.B) {
	const n = 64
	an := delayed{solve: 200 * time.Millisecond, add: 10 * time.Millisecond}
	for i := 0; i < b.N; i++ {
		base := runSimulated(b, an, n, 1, 1)
		b.ReportMetric(base, "frames/s(w=1)")
		seq := runSimulated(b, an, n, 4, 1)
		b.ReportMetric(seq/base, "x(w=4,one-at-a-time)")
		for _, w := range []int{2, 4, 8, 16} {
			r := runSimulated(b, an, n, w, w)
			b.ReportMetric(r/base, fmt.Sprintf("x(w=%d)", w))
		}
	}
}

// bytesBuffer holds a PNG and hands out readers of it.
type bytesBuffer struct{ b []byte }

func (p *bytesBuffer) Write(b []byte) (int, error) { p.b = append(p.b, b...); return len(b), nil }
func (p *bytesBuffer) reader() io.Reader           { return bytes.NewReader(p.b) }

// BenchmarkSeriesInFlight runs one direct-mode series of 512×384 frames
// (subset 21, step 8) through the real pipeline on the embedded backend,
// with one and two workers of one compute thread each, one frame at a
// time and with two frames in flight: the embedded backend's own pool
// under the same rule as a cluster. Besides frames per second (wall time,
// which other processes on the machine lengthen) it reports figures of
// the structure: the CPU seconds the process spent per frame (user+sys),
// and per frame the seconds workers held frames waiting for their
// predecessor, solved frames ahead and added solved frames to the state
// in frame order (Stats). Run with
//
//	go test -run '^$' -bench SeriesInFlight -benchtime 1x ./pkg/runner
func BenchmarkSeriesInFlight(b *testing.B) {
	const n = 16
	ref, imgs, p := aheadSeriesSize(b, n, 512)
	for _, c := range []struct{ workers, inFlight int }{{1, 1}, {2, 1}, {2, 2}} {
		b.Run(fmt.Sprintf("workers=%d/in-flight=%d", c.workers, c.inFlight), func(b *testing.B) {
			var el, cpu time.Duration
			var st Stats
			for i := 0; i < b.N; i++ {
				be, err := embedded.Open(b.TempDir(), 4*n)
				if err != nil {
					b.Fatal(err)
				}
				_, ids := submitSeries(b, be, ref, imgs, p, c.inFlight)
				rn, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: c.workers, JobThreads: 1, Logger: slog.New(slog.NewJSONHandler(io.Discard, nil))})
				if err != nil {
					b.Fatal(err)
				}
				start, c0 := time.Now(), cpuTime()
				stop, err := rn.Start(context.Background())
				if err != nil {
					b.Fatal(err)
				}
				for deadline := start.Add(20 * time.Minute); ; time.Sleep(10 * time.Millisecond) {
					j, err := be.Store.Job(context.Background(), ids[n-1])
					if err == nil && j.State.Terminal() {
						if j.State != jobs.Succeeded {
							b.Fatalf("last frame %s %+v", j.State, j.Error)
						}
						break
					}
					if time.Now().After(deadline) {
						b.Fatal("series not finished within 20 minutes")
					}
				}
				el += time.Since(start)
				cpu += cpuTime() - c0
				s := rn.Stats()
				st.SolvedAhead += s.SolvedAhead
				st.SolveSeconds += s.SolveSeconds
				st.AddSeconds += s.AddSeconds
				st.HeldSeconds += s.HeldSeconds
				st.GuessState += s.GuessState
				st.GuessNone += s.GuessNone
				stop()
				be.Close()
			}
			f := float64(b.N * n)
			b.ReportMetric(f/el.Seconds(), "frames/s")
			b.ReportMetric(cpu.Seconds()/f, "cpu-s/frame")
			b.ReportMetric(float64(st.SolvedAhead)/f, "solved-ahead/frame")
			b.ReportMetric(st.SolveSeconds/f, "solve-s/frame")
			b.ReportMetric(st.AddSeconds/f, "add-s/frame")
			b.ReportMetric(st.HeldSeconds/f, "held-s/frame")
			b.ReportMetric(float64(st.GuessState)/f, "guess-state/frame")
			b.ReportMetric(float64(st.GuessExtrapolated)/f, "guess-extrapolated/frame")
			b.ReportMetric(float64(st.GuessNone)/f, "guess-none/frame")
		})
	}
}

package runner

import (
	"bytes"
	"context"
	"errors"
	"io"
	"log/slog"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/service/embedded"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// TestStateForms runs one series on a worker of one state form
// (Config.StateJSON) up to frame 2, stops it there, and finishes the
// series on a worker of the other form, in both orders: a rolling
// upgrade to the binary state and back. Every frame succeeds; the worker
// of the second form continues from the state of the first; the state
// after the last frame is stored in the second worker's form and no
// earlier state is left in either form; and the curve is the sequential
// run's exactly (one frame at a time, so every frame starts from the
// guess of a sequential run).
func TestStateForms(t *testing.T) {
	const nFrames = 4
	ref, imgs, p := aheadSeries(t, nFrames)
	seq, err := series.New(ref, series.FrameMeta{Name: "reference"}, p)
	if err != nil {
		t.Fatal(err)
	}
	for _, im := range imgs {
		if _, err := seq.Add(context.Background(), im, series.FrameMeta{}); err != nil {
			t.Fatal(err)
		}
	}
	want := seq.Curve()
	quiet := slog.New(slog.NewJSONHandler(io.Discard, nil))
	for _, firstJSON := range []bool{true, false} {
		name := map[bool]string{true: "json then binary", false: "binary then json"}[firstJSON]
		t.Run(name, func(t *testing.T) {
			ctx := context.Background()
			dir := t.TempDir()
			be, err := embedded.Open(dir, 64)
			if err != nil {
				t.Fatal(err)
			}
			sr, ids := submitSeries(t, be, ref, imgs, p, 1)
			atTwo := make(chan struct{})
			r1, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: 1, Logger: quiet, StateJSON: firstJSON,
				ShutdownGrace: 10 * time.Millisecond,
				BeforeCompute: func(ctx context.Context, j jobs.Job) {
					if j.FrameIndex == 2 {
						close(atTwo)
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
			mid := []string{BinaryStateKey(sr.ID, 1), StateKey(sr.ID, 1)}
			if firstJSON {
				mid[0], mid[1] = mid[1], mid[0]
			}
			if rc, err := be.Blobs.Get(ctx, mid[0]); err != nil {
				t.Errorf("the first worker's state after frame 1 is not under %s: %v", mid[0], err)
			} else {
				rc.Close()
			}
			if _, err := be.Blobs.Get(ctx, mid[1]); !errors.Is(err, jobs.ErrNotFound) {
				t.Errorf("a state after frame 1 under %s too: %v", mid[1], err)
			}
			r2, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: 1, Logger: quiet, StateJSON: !firstJSON})
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
			for k, id := range ids {
				if j, err := be.Store.Job(ctx, id); err != nil || j.State != jobs.Succeeded {
					t.Fatalf("frame %d: %v %+v", k, err, j)
				}
			}
			last := []string{BinaryStateKey(sr.ID, nFrames-1), StateKey(sr.ID, nFrames-1)}
			if !firstJSON {
				last[0], last[1] = last[1], last[0]
			}
			b, err := r2.ReadBlob(ctx, last[0])
			if err != nil {
				t.Fatalf("the state after the last frame is not under %s: %v", last[0], err)
			}
			if _, err := r2.ReadBlob(ctx, last[1]); !errors.Is(err, jobs.ErrNotFound) {
				t.Errorf("a state after the last frame under %s too: %v", last[1], err)
			}
			// The state a frame continued from is removed just after the
			// frame is recorded as done.
			left := func() (string, error) {
				for n := range nFrames - 1 {
					for _, key := range []string{StateKey(sr.ID, n), BinaryStateKey(sr.ID, n)} {
						if _, err := r2.ReadBlob(ctx, key); !errors.Is(err, jobs.ErrNotFound) {
							return key, err
						}
					}
				}
				return "", nil
			}
			key, err := left()
			for end := time.Now().Add(10 * time.Second); key != "" && time.Now().Before(end); key, err = left() {
				time.Sleep(20 * time.Millisecond)
			}
			if key != "" {
				t.Errorf("an earlier state is still stored under %s 10 s after the last frame (%v)", key, err)
			}
			st, err := series.DecodeState(b)
			if err != nil {
				t.Fatal(err)
			}
			got := series.CurveOf(st)
			if len(got.Rows) != len(want.Rows) {
				t.Fatalf("%d curve rows, want %d", len(got.Rows), len(want.Rows))
			}
			for i := range want.Rows {
				for _, q := range series.MeanNames {
					if g, w := got.Rows[i].Mean[q], want.Rows[i].Mean[q]; g != w && !(g != g && w != w) {
						t.Errorf("frame %d %s: %g, sequential %g", i, q, g, w)
					}
				}
			}
		})
	}
}

// TestSolveGuessBefore checks that Pipeline.Solve given the solutions of
// two earlier frames solves from their extrapolation (series.Extrapolate
// with GuessRatio), bit for bit, and that stepRatio takes the ratio from
// the frames' times when all three have increasing ones, else from their
// indices.
func TestSolveGuessBefore(t *testing.T) {
	ref, imgs, p := aheadSeries(t, 3)
	params, err := p.FlatJSON()
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	an := Pipeline{}
	var sols []*series.Solution
	var blobs [][]byte
	for _, im := range imgs[:2] {
		b, err := an.Solve(ctx, SolveInput{Ref: ref, Def: im, Params: params, Threads: 1})
		if err != nil {
			t.Fatal(err)
		}
		s, err := series.DecodeSolution(b)
		if err != nil {
			t.Fatal(err)
		}
		blobs, sols = append(blobs, b), append(sols, s)
	}
	got, err := an.Solve(ctx, SolveInput{Ref: ref, Def: imgs[2], Params: params, Guess: blobs[1], GuessBefore: blobs[0], GuessRatio: 1, Threads: 1})
	if err != nil {
		t.Fatal(err)
	}
	ps, err := DecodeSeriesParams(params)
	if err != nil {
		t.Fatal(err)
	}
	ps.Analysis.Threads = 1
	want, err := series.Solve(ctx, ref, imgs[2], ps, series.Options{}, series.Extrapolate(sols[0], sols[1], 1), nil)
	if err != nil {
		t.Fatal(err)
	}
	wb, err := want.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got, wb) {
		t.Error("Solve with GuessBefore differs from a solve from the extrapolated guess")
	}

	be, err := embedded.Open(t.TempDir(), 64)
	if err != nil {
		t.Fatal(err)
	}
	defer be.Close()
	rn, err := New(Config{Backend: be, Analyzer: an, Workers: 1, Logger: slog.New(slog.NewJSONHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	sr, ids := submitSeries(t, be, ref, imgs, p, 2)
	at := func(id string, tm *float64) *jobs.Job {
		j, err := be.Store.UpdateJob(ctx, id, func(j *jobs.Job) error { j.Time = tm; return nil })
		if err != nil {
			t.Fatal(err)
		}
		return j
	}
	f := func(v float64) *float64 { return &v }
	at(ids[0], f(1))
	at(ids[1], f(1.5))
	if r := rn.stepRatio(ctx, sr, at(ids[2], f(3)), 1); r != 3 {
		t.Errorf("times 1, 1.5, 3: ratio %g, want 3", r)
	}
	if r := rn.stepRatio(ctx, sr, at(ids[2], nil), 1); r != 1 {
		t.Errorf("no time on the frame: ratio %g, want 1 (by index)", r)
	}
	at(ids[1], f(0.5))
	if r := rn.stepRatio(ctx, sr, at(ids[2], f(3)), 1); r != 1 {
		t.Errorf("times that do not increase: ratio %g, want 1 (by index)", r)
	}
}

package runner

import (
	"context"
	"syscall"
	"testing"
	"time"
)

// cpuTime is the user+system CPU time of this process so far.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	_ = syscall.Getrusage(syscall.RUSAGE_SELF, &ru)
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// perOp runs f b.N times and reports its CPU time per run beside the
// wall time: other processes on the machine lengthen the wall time only.
func perOp(b *testing.B, f func() error) {
	c0 := cpuTime()
	b.ResetTimer()
	for range b.N {
		if err := f(); err != nil {
			b.Fatal(err)
		}
	}
	b.StopTimer()
	b.ReportMetric(float64(cpuTime()-c0)/1e6/float64(b.N), "cpu-ms/op")
}

// BenchmarkFrameSteps: the steps of a solved-ahead frame on 512×384 px.
// The last three solve frame 4 from the solution of frame 3 (one back),
// of frame 2 (two back), and of frame 2 moved on along the step from
// frame 1 (series.Extrapolate, the guess of a frame solved while the one
// before it is still being solved).
func BenchmarkFrameSteps(b *testing.B) {
	ref, imgs, p := aheadSeriesSize(b, 4, 512)
	params, err := p.FlatJSON()
	if err != nil {
		b.Fatal(err)
	}
	ctx := context.Background()
	an := Pipeline{}
	r0, err := an.Frame(ctx, FrameInput{Ref: ref, Def: imgs[0], Params: params, Threads: 1})
	if err != nil {
		b.Fatal(err)
	}
	sol, err := an.Solve(ctx, SolveInput{Ref: ref, Def: imgs[1], Params: params, GuessState: r0.State, Threads: 1})
	if err != nil {
		b.Fatal(err)
	}
	in := FrameInput{Ref: ref, Last: imgs[0], Def: imgs[1], Params: params, State: r0.State, Threads: 1}
	b.Run("solve", func(b *testing.B) {
		perOp(b, func() error {
			_, err := an.Solve(ctx, SolveInput{Ref: ref, Def: imgs[1], Params: params, GuessState: r0.State, Threads: 1})
			return err
		})
	})
	b.Run("solve-two-back", func(b *testing.B) {
		perOp(b, func() error {
			_, err := an.Solve(ctx, SolveInput{Ref: ref, Def: imgs[2], Params: params, GuessState: r0.State, Threads: 1})
			return err
		})
	})
	b.Run("add-solved", func(b *testing.B) {
		in := in
		in.Solved = sol
		perOp(b, func() error { _, err := an.Frame(ctx, in); return err })
	})
	// The same with the state read and written as JSON, the form of
	// earlier versions (Config.StateJSON).
	js, err := an.Frame(ctx, FrameInput{Ref: ref, Def: imgs[0], Params: params, Threads: 1, StateJSON: true})
	if err != nil {
		b.Fatal(err)
	}
	b.Run("add-solved-json", func(b *testing.B) {
		in := in
		in.Solved, in.State, in.StateJSON = sol, js.State, true
		perOp(b, func() error { _, err := an.Frame(ctx, in); return err })
	})
	b.Run("add", func(b *testing.B) {
		perOp(b, func() error { _, err := an.Frame(ctx, in); return err })
	})
	sols := make([][]byte, 3)
	for k := range sols {
		if sols[k], err = an.Solve(ctx, SolveInput{Ref: ref, Def: imgs[k], Params: params, GuessState: r0.State, Threads: 1}); err != nil {
			b.Fatal(err)
		}
	}
	for _, c := range []struct {
		name          string
		guess, before []byte
	}{
		{"solve4-one-back", sols[2], nil},
		{"solve4-two-back", sols[1], nil},
		{"solve4-two-back-extrapolated", sols[1], sols[0]},
	} {
		b.Run(c.name, func(b *testing.B) {
			perOp(b, func() error {
				_, err := an.Solve(ctx, SolveInput{Ref: ref, Def: imgs[3], Params: params, Guess: c.guess, GuessBefore: c.before, GuessRatio: 2, Threads: 1})
				return err
			})
		})
	}
}

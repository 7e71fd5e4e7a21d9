package correlate

import (
	"context"
	"math"
	"runtime"
	"testing"

	"github.com/mottledic/mottle/pkg/synth"
)

// pointBits flattens points into their exact bit patterns.
func pointBits(ps []Point) []uint64 {
	var out []uint64
	for _, p := range ps {
		out = append(out, math.Float64bits(p.X), math.Float64bits(p.Y), math.Float64bits(p.ZNCC),
			math.Float64bits(p.StdU), math.Float64bits(p.StdV), uint64(p.Iter), uint64(p.Status))
		if p.Converged {
			out = append(out, 1)
		}
		for _, v := range p.P {
			out = append(out, math.Float64bits(v))
		}
	}
	return out
}

// Results must not depend on the number of goroutines or on GOMAXPROCS
// (project rule). A rotated, noisy pair with a blank patch makes the order
// of propagation matter, so a scheduling dependence would show.
func TestDeterministicAcrossThreads(t *testing.T) {
	m := synth.Rotation{Angle: 6, CX: 100, CY: 90, U: 1.7, V: -2.2}
	ref, def := pair(t, m, 200, 180, 8, 2, 3)
	for y := 60; y < 100; y++ { // a textureless patch: its points fail
		for x := 40; x < 90; x++ {
			def.Set(x, y, 128)
		}
	}
	opt := Options{Subset: 21, Step: 5}
	var want []uint64
	defer runtime.GOMAXPROCS(runtime.GOMAXPROCS(0))
	for _, c := range []struct{ procs, threads int }{{1, 1}, {1, 0}, {2, 2}, {4, 4}, {2, 7}} {
		runtime.GOMAXPROCS(c.procs)
		opt.Threads = c.threads
		res, err := Run(context.Background(), ref, def, opt)
		if err != nil {
			t.Fatal(err)
		}
		got := pointBits(res.Points)
		if want == nil {
			want = got
			if res.Stats.OK < 500 || res.Stats.OK == res.Stats.Total {
				t.Fatalf("test case too easy or broken: %+v", res.Stats)
			}
			continue
		}
		if len(got) != len(want) {
			t.Fatalf("GOMAXPROCS=%d threads=%d: %d values, want %d", c.procs, c.threads, len(got), len(want))
		}
		for i := range got {
			if got[i] != want[i] {
				t.Fatalf("GOMAXPROCS=%d threads=%d: result differs from the single-thread run (value %d)", c.procs, c.threads, i)
			}
		}
	}
}

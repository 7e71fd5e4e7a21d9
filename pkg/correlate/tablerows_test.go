package correlate

import (
	"context"
	"runtime"
	"slices"
	"testing"

	"github.com/mottledic/mottle/pkg/synth"
)

// Results on the row table do not depend on the number of goroutines or
// on GOMAXPROCS either (project rule), first and second order, on the
// rotated pair with a blank patch of TestDeterministicAcrossThreads; and
// the run does build the row table.
func TestRowTableDeterministicAcrossThreads(t *testing.T) {
	m := synth.Rotation{Angle: 6, CX: 100, CY: 90, U: 1.7, V: -2.2}
	ref, def := pair(t, m, 200, 180, 8, 2, 3)
	for y := 60; y < 100; y++ {
		for x := 40; x < 90; x++ {
			def.Set(x, y, 128)
		}
	}
	defer runtime.GOMAXPROCS(runtime.GOMAXPROCS(0))
	tun := tuning{table: tableRows}
	for _, sh := range []Shape{First, Second} {
		opt := Options{Subset: 21, Step: 5, Shape: sh}
		var want []uint64
		for _, c := range []struct{ procs, threads int }{{1, 1}, {2, 2}, {2, 7}} {
			runtime.GOMAXPROCS(c.procs)
			opt.Threads = c.threads
			res, err := runWith(context.Background(), ref, def, opt, tun)
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
			if !slices.Equal(got, want) {
				t.Fatalf("shape %d GOMAXPROCS=%d threads=%d: result differs from the single-thread run", sh, c.procs, c.threads)
			}
		}
	}
	r, err := start(context.Background(), ref, def, Options{Subset: 21, Step: 5, Threads: 1}, tun, true)
	if err != nil {
		t.Fatal(err)
	}
	defer r.stop()
	if s := r.solvers[0]; s.rtab == nil || s.tab != nil || s.def != nil {
		t.Fatalf("solver has row table %v, table %v, spline %v; want the row table only", s.rtab != nil, s.tab != nil, s.def != nil)
	}
}

package correlate

import (
	"context"
	"runtime"
	"slices"
	"testing"

	"github.com/mottledic/mottle/pkg/spline"
	"github.com/mottledic/mottle/pkg/synth"
)

// Results on the row table and on the quintic row table (the series
// defaults: quintic, prefilter σ 0.8) do not depend on the number of
// goroutines or on GOMAXPROCS either (project rule), first and second
// order, on the rotated pair with a blank patch of
// TestDeterministicAcrossThreads; and the runs do build those tables.
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
	for _, c := range []struct {
		sh      Shape
		quintic bool
	}{{First, false}, {Second, false}, {First, true}, {Second, true}} {
		sh := c.sh
		opt := Options{Subset: 21, Step: 5, Shape: sh}
		if c.quintic {
			opt.Interp, opt.Prefilter = spline.Quintic, 0.8
		}
		var want []uint64
		for _, p := range []struct{ procs, threads int }{{1, 1}, {2, 2}, {2, 7}} {
			runtime.GOMAXPROCS(p.procs)
			opt.Threads = p.threads
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
				t.Fatalf("shape %d quintic %v GOMAXPROCS=%d threads=%d: result differs from the single-thread run", sh, c.quintic, p.procs, p.threads)
			}
		}
	}
	r, err := start(context.Background(), ref, def, Options{Subset: 21, Step: 5, Threads: 1}, tun, true)
	if err != nil {
		t.Fatal(err)
	}
	defer r.stop()
	if s := r.solvers[0]; s.rtab == nil || s.tab != nil || s.qtab != nil || s.def != nil {
		t.Fatalf("solver has row table %v, table %v, quintic row table %v, spline %v; want the row table only", s.rtab != nil, s.tab != nil, s.qtab != nil, s.def != nil)
	}
	r, err = start(context.Background(), ref, def, Options{Subset: 21, Step: 5, Threads: 1, Interp: spline.Quintic}, tuning{}, true)
	if err != nil {
		t.Fatal(err)
	}
	defer r.stop()
	if s := r.solvers[0]; s.qtab == nil || s.tab != nil || s.rtab != nil || s.def != nil {
		t.Fatalf("quintic: solver has quintic row table %v, table %v, row table %v, spline %v; want the quintic row table only", s.qtab != nil, s.tab != nil, s.rtab != nil, s.def != nil)
	}
}

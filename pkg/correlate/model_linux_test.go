package correlate

import (
	"cmp"
	"context"
	"math"
	"runtime"
	"slices"
	"syscall"
	"testing"
	"time"
	"unsafe"
)

// threadCPU returns the CPU time of the calling OS thread
// (CLOCK_THREAD_CPUTIME_ID), which other processes on a shared machine do
// not inflate.
func threadCPU() time.Duration {
	var ts syscall.Timespec
	const clockThreadCPUTime = 3
	syscall.Syscall(syscall.SYS_CLOCK_GETTIME, clockThreadCPUTime, uintptr(unsafe.Pointer(&ts)), 0)
	return time.Duration(ts.Nano())
}

// makespan returns the time threads workers need for items of the given
// costs when each free worker takes the next item in order, as the pool's
// cursor hands them out.
func makespan(cost []time.Duration, threads int) time.Duration {
	free := make([]time.Duration, threads) // when each worker is next free
	for _, c := range cost {
		w := 0
		for i := range free {
			if free[i] < free[w] {
				w = i
			}
		}
		free[w] += c
	}
	var end time.Duration
	for _, f := range free {
		end = max(end, f)
	}
	return end
}

// pipeline returns the time two workers need for the batches of a
// one-thread trace scheduled as the pool does. The caller's operations
// are replayed in their one-thread order: publishing a batch, after the
// serial work since its previous operation (accepting results, forming
// the batch), and awaiting one, during which it computes points too;
// every free worker takes the next published point in order.
func pipeline(bs []*traceBatch) time.Duration {
	K := len(bs)
	type op struct {
		at    time.Duration
		batch int
		pub   bool
	}
	var ops []op
	for k, b := range bs {
		ops = append(ops, op{b.send, k, true}, op{b.done, k, false})
	}
	slices.SortStableFunc(ops, func(a, b op) int { return cmp.Compare(a.at, b.at) })
	pub := make([]time.Duration, K)
	end := make([]time.Duration, K) // when the last point of each batch ends
	got := make([]int, K)           // points of each batch handed out
	var t, h time.Duration          // when the caller and the helper are free
	nb, nj, npub := 0, 0, 0         // next point (batch, index); batches published
	give := func(stop func() bool) {
		for nb < npub && !stop() {
			if nj == len(bs[nb].cost) {
				nb, nj = nb+1, 0
				continue
			}
			c := bs[nb].cost[nj]
			hs, cs := max(h, pub[nb]), max(t, pub[nb])
			var e time.Duration
			if hs <= cs {
				h = hs + c
				e = h
			} else {
				t = cs + c
				e = t
			}
			end[nb] = max(end[nb], e)
			got[nb]++
			nj++
		}
	}
	var prev time.Duration
	for _, o := range ops {
		gap := o.at - prev // the caller's own work before this operation
		prev = o.at
		if o.pub {
			t += gap
			pub[o.batch] = t
			npub = o.batch + 1
			continue
		}
		for _, c := range bs[o.batch].cost {
			gap -= c // computing the batch is not serial work
		}
		t += max(gap, 0)
		w := o.batch
		give(func() bool { return got[w] == len(bs[w].cost) && t >= end[w] })
		t = max(t, end[w])
	}
	return max(t, h)
}

// BenchmarkRun1024Model runs BenchmarkRun1024 on one thread with every
// phase, batch and point timed by the thread's CPU clock, and predicts
// from those costs the wall time of the same run on two threads, with no
// cost of synchronisation: the parts of each set-up step shared out on
// the pool scheduled as the pool hands them out (makespan) and the rest of
// the set-up serial, the serial work of the propagation loop (seeds,
// accepting results, forming batches) and of finish as measured, and the
// batches scheduled as the pool does (pipeline). eff2 is the predicted
// 1→2-thread efficiency; eff2-barrier the same for a pool that waits for
// each batch before it forms the next (the pool before the pipeline),
// serial% the share of the one-thread time that does not split (of which
// setup-serial% in the set-up; setup% is the whole set-up), crit% the excess of
// the barrier pool's per-batch makespans over an even split. The figures
// depend on the costs of the points, not on the machine's load. A traced
// run on two threads adds the share of the points the helper computed, how
// often it slept and the caller waited asleep for the last items per batch,
// and asleep%, the time both spent asleep (from going to sleep to running
// again) over twice the run's wall time: on idle cores, the capacity lost
// to waking.
func BenchmarkRun1024Model(b *testing.B) {
	ref, def := benchImages(b)
	runtime.LockOSThread()
	defer runtime.UnlockOSThread()
	var t1, t2, tb, serial, excess, setupSer, setupAll time.Duration
	var batches, short, points int
	for b.Loop() {
		tr := &poolTrace{clock: threadCPU}
		c0 := threadCPU()
		if _, err := runWith(context.Background(), ref, def, Options{Subset: 31, Step: 8, Threads: 1}, tuning{trace: tr}); err != nil {
			b.Fatal(err)
		}
		var setup, prop, prop0 time.Duration
		prev := c0
		for _, p := range tr.phases {
			switch p.name {
			case "propagate":
				prop, prop0 = p.at-prev, prev
			case "seeds", "finish":
				serial += p.at - prev
				t1 += p.at - prev
				t2 += p.at - prev
				tb += p.at - prev
			default:
				setup += p.at - prev
			}
			prev = p.at
		}
		var inBatches, ms time.Duration
		for _, bt := range tr.batches {
			var sum time.Duration
			for _, c := range bt.cost {
				sum += c
			}
			inBatches += sum
			m := makespan(bt.cost, 2)
			ms += m
			excess += m - sum/2
			batches++
			points += bt.n
			if bt.n < batchSize {
				short++
			}
		}
		// The set-up steps shared out on the pool split as the pool
		// schedules their parts; the rest of the set-up is serial.
		var inRegions, regionSpan time.Duration
		for _, rg := range tr.regions {
			for _, c := range rg.cost {
				inRegions += c
			}
			regionSpan += makespan(rg.cost, 2)
		}
		setupSerial := setup - inRegions
		rest := prop - inBatches // serial work of the propagation loop
		// The replay covers the loop from the first batch to the last
		// await; before and after it the work is serial.
		first, last := tr.batches[0].send, tr.batches[len(tr.batches)-1].done
		pp := pipeline(tr.batches) - first
		if testing.Verbose() {
			b.Logf("setup %v (serial %v, parts %v in %d steps, span on 2 %v) prop %v points %v rest %v replay %v barrier %v", setup, setupSerial, inRegions, len(tr.regions), regionSpan, prop, inBatches, rest, pp, ms)
		}
		t1 += setup + prop
		t2 += setupSerial + regionSpan + (first - prop0) + pp + (prop0 + prop - last)
		tb += setupSerial + regionSpan + rest + ms
		serial += rest + setupSerial
		setupSer += setupSerial
		setupAll += setup
	}
	// The same run on two threads, for the division of the points and the
	// helper's sleeps; on a loaded machine the wall time says little.
	tr := &poolTrace{}
	w0 := time.Now()
	if _, err := runWith(context.Background(), ref, def, Options{Subset: 31, Step: 8, Threads: 2}, tuning{trace: tr}); err != nil {
		b.Fatal(err)
	}
	wall := time.Since(w0)
	var helper, all int
	for _, bt := range tr.batches {
		helper += bt.w[1].n
		all += bt.n
	}
	b.ReportMetric(float64(helper)/float64(all), "helper-share")
	b.ReportMetric(float64(tr.sleeps)/float64(len(tr.batches)), "sleeps/batch")
	b.ReportMetric(float64(tr.spun.Microseconds())/float64(len(tr.batches)), "spin-µs/batch")
	b.ReportMetric(float64(tr.waits)/float64(len(tr.batches)), "waits/batch")
	b.ReportMetric(100*float64(tr.slept+tr.waited)/float64(2*wall), "asleep%")
	b.ReportMetric(float64(t1)/float64(2*t2), "eff2")
	b.ReportMetric(float64(t1)/float64(2*tb), "eff2-barrier")
	b.ReportMetric(100*float64(serial)/float64(t1), "serial%")
	b.ReportMetric(100*float64(setupAll)/float64(t1), "setup%")
	b.ReportMetric(100*float64(setupSer)/float64(t1), "setup-serial%")
	b.ReportMetric(100*float64(excess)/float64(t1), "crit%")
	b.ReportMetric(float64(points)/float64(batches), "points/batch")
	b.ReportMetric(float64(short)/float64(b.N), "short-batches/run")
}

// BenchmarkRun1024Contention measures what running the second worker
// costs the first through the hardware they share (caches, memory
// bandwidth, a physical core's execution units if the two CPUs are
// hyperthreads of one core), independently of the machine's load. Each
// round computes the BenchmarkRun1024 pair on one thread and then on
// two, every item timed by its thread's CPU clock. A point is computed
// the same way on one thread and on two (the same starting guesses and
// iterations), so the CPU time of an item of the two-thread run over the
// same point's time in the one-thread run is its slow-down. Only items
// that kept their CPU throughout (CPU time at least 95 % of the wall
// time) are compared, split by what the other worker did meanwhile:
// co-run (it was computing and on a CPU the whole time) or alone (it
// computed nothing). contention is the ratio of the two medians: 1 when
// the two workers do not slow each other down, about 1.6–2 for
// hyperthreads of one core on this floating-point work.
func BenchmarkRun1024Contention(b *testing.B) {
	ref, def := benchImages(b)
	runtime.LockOSThread()
	defer runtime.UnlockOSThread()
	type rec struct {
		w      int32
		t0, t1 time.Duration
		cpu    time.Duration
	}
	held := func(x rec) bool { return float64(x.cpu) >= 0.95*float64(x.t1-x.t0) }
	collect := func(th int) map[int32]rec {
		runtime.GC()
		tr := &poolTrace{clock: threadCPU}
		if _, err := runWith(context.Background(), ref, def, Options{Subset: 31, Step: 8, Threads: th}, tuning{trace: tr}); err != nil {
			b.Fatal(err)
		}
		out := map[int32]rec{}
		for _, bt := range tr.batches {
			for k, it := range bt.item {
				out[it.idx] = rec{it.w, it.t0, it.t1, bt.cost[k]}
			}
		}
		return out
	}
	// cover returns how much of [a, b) the spans s (sorted by start, not
	// overlapping) cover.
	type span struct{ t0, t1 time.Duration }
	cover := func(s []span, a, b time.Duration) time.Duration {
		i, _ := slices.BinarySearchFunc(s, a, func(x span, t time.Duration) int { return cmp.Compare(x.t1, t) })
		var c time.Duration
		for ; i < len(s) && s[i].t0 < b; i++ {
			c += min(s[i].t1, b) - max(s[i].t0, a)
		}
		return max(c, 0)
	}
	var co, alone []float64
	for b.Loop() {
		one, two := collect(1), collect(2)
		var all, kept [2][]span
		for _, x := range two {
			all[x.w] = append(all[x.w], span{x.t0, x.t1})
			if held(x) {
				kept[x.w] = append(kept[x.w], span{x.t0, x.t1})
			}
		}
		for w := range all {
			for _, s := range [][]span{all[w], kept[w]} {
				slices.SortFunc(s, func(p, q span) int { return cmp.Compare(p.t0, q.t0) })
			}
		}
		for idx, x := range two {
			o, ok := one[idx]
			if !ok || !held(x) || !held(o) || o.cpu <= 0 {
				continue
			}
			d, other := x.t1-x.t0, 1-x.w
			ratio := float64(x.cpu) / float64(o.cpu)
			switch {
			case cover(kept[other], x.t0, x.t1) >= d*95/100:
				co = append(co, ratio)
			case cover(all[other], x.t0, x.t1) == 0:
				alone = append(alone, ratio)
			}
		}
	}
	med := func(x []float64) float64 {
		if len(x) == 0 {
			return math.NaN()
		}
		slices.Sort(x)
		return x[len(x)/2]
	}
	b.ReportMetric(med(co), "co-run-slowdown")
	b.ReportMetric(med(alone), "alone-slowdown")
	b.ReportMetric(med(co)/med(alone), "contention")
	b.ReportMetric(float64(len(co))/float64(b.N), "co-run-items/round")
	b.ReportMetric(float64(len(alone))/float64(b.N), "alone-items/round")
}

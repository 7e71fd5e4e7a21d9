package correlate

import (
	"context"
	"runtime"
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
// one-thread trace when the caller forms batch k+1 while the helper
// computes batch k (the pool of pool.go): serial[k] is the caller's work
// before it publishes batch k (accepting batch k−2 and forming k), and
// every free worker takes the next published point in order; the caller
// takes points only while it waits for the batch before the newest one.
func pipeline(bs []*traceBatch, serial []time.Duration) time.Duration {
	K := len(bs)
	pub := make([]time.Duration, K)
	end := make([]time.Duration, K) // when the last point of each batch ends
	got := make([]int, K)           // points of each batch handed out
	var t, h time.Duration          // when the caller and the helper are free
	nb, nj := 0, 0                  // next point: batch and index
	give := func(limit int, stop func() bool) {
		for nb <= limit && !stop() {
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
	for k := 0; k < K; k++ {
		if k >= 2 {
			t = max(t, end[k-2])
		}
		t += serial[k]
		pub[k] = t
		if k >= 1 {
			w := k - 1
			give(k, func() bool { return got[w] == len(bs[w].cost) && t >= end[w] })
			if got[w] < len(bs[w].cost) {
				panic("model: batch not handed out")
			}
		}
	}
	give(K-1, func() bool { return false })
	return max(t, h, end[K-1])
}

// BenchmarkRun1024Model runs BenchmarkRun1024 on one thread with every
// phase, batch and point timed by the thread's CPU clock, and predicts
// from those costs the wall time of the same run on two threads, with no
// cost of synchronisation: the set-up phases split evenly (they are split
// by rows), the serial work of the propagation loop (seeds, accepting
// results, forming batches) and of finish as measured, and the batches
// scheduled as the pool does (pipeline). eff2 is the predicted 1→2-thread
// efficiency; eff2-barrier the same for a pool that waits for each batch
// before it forms the next (the pool before the pipeline), serial% the
// share of the one-thread time that does not split, crit% the excess of
// the barrier pool's per-batch makespans over an even split. The figures
// depend on the costs of the points, not on the machine's load.
func BenchmarkRun1024Model(b *testing.B) {
	ref, def := benchImages(b)
	runtime.LockOSThread()
	defer runtime.UnlockOSThread()
	var t1, t2, tb, serial, excess time.Duration
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
			case "finish":
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
		ser := make([]time.Duration, len(tr.batches))
		for i, bt := range tr.batches {
			var sum time.Duration
			for _, c := range bt.cost {
				sum += c
			}
			inBatches += sum
			switch i {
			case 0:
				ser[i] = bt.send - prop0
			case 1:
				ser[i] = bt.send - tr.batches[0].send
			default:
				ser[i] = bt.send - tr.batches[i-2].done
			}
			m := makespan(bt.cost, 2)
			ms += m
			excess += m - sum/2
			batches++
			points += bt.n
			if bt.n < batchSize {
				short++
			}
		}
		rest := prop - inBatches // serial work of the propagation loop
		t1 += setup + prop
		t2 += setup/2 + (rest - sum(ser)) + pipeline(tr.batches, ser)
		tb += setup/2 + rest + ms
		serial += rest
	}
	b.ReportMetric(float64(t1)/float64(2*t2), "eff2")
	b.ReportMetric(float64(t1)/float64(2*tb), "eff2-barrier")
	b.ReportMetric(100*float64(serial)/float64(t1), "serial%")
	b.ReportMetric(100*float64(excess)/float64(t1), "crit%")
	b.ReportMetric(float64(points)/float64(batches), "points/batch")
	b.ReportMetric(float64(short)/float64(b.N), "short-batches/run")
}

func sum(ds []time.Duration) time.Duration {
	var s time.Duration
	for _, d := range ds {
		s += d
	}
	return s
}

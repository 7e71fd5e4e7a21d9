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

// BenchmarkRun1024Model runs BenchmarkRun1024 on one thread with every
// phase, batch and point timed by the thread's CPU clock, and predicts
// from those costs the wall time of the same run on two threads, with no
// synchronisation cost: the set-up phases split evenly (they are split by
// rows), the serial work of the propagation loop (accepting results,
// forming batches, seeds) as measured, and each batch taking the makespan
// of its points on two workers. eff2 is the predicted 1→2-thread
// efficiency, serial% the share of the one-thread time that does not
// split, crit% the makespans' excess over an even split. The figure
// depends on the costs of the points, not on the machine's load.
func BenchmarkRun1024Model(b *testing.B) {
	ref, def := benchImages(b)
	runtime.LockOSThread()
	defer runtime.UnlockOSThread()
	var t1, t2, serial, excess time.Duration
	var batches, short, points int
	for b.Loop() {
		tr := &poolTrace{clock: threadCPU}
		c0 := threadCPU()
		if _, err := runWith(context.Background(), ref, def, Options{Subset: 31, Step: 8, Threads: 1}, tuning{trace: tr}); err != nil {
			b.Fatal(err)
		}
		var setup, prop time.Duration
		prev := c0
		for _, p := range tr.phases {
			switch p.name {
			case "propagate":
				prop = p.at - prev
			case "finish":
				serial += p.at - prev
				t2 += p.at - prev
				t1 += p.at - prev
			default:
				setup += p.at - prev
			}
			prev = p.at
		}
		var inBatches, ms time.Duration
		for _, bt := range tr.batches {
			inBatches += bt.done - bt.send
			var sum time.Duration
			for _, c := range bt.cost {
				sum += c
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
		ser := prop - inBatches // seeds, accepting, forming batches
		t1 += setup + prop
		t2 += setup/2 + ser + ms
		serial += ser
	}
	b.ReportMetric(float64(t1)/float64(2*t2), "eff2")
	b.ReportMetric(100*float64(serial)/float64(t1), "serial%")
	b.ReportMetric(100*float64(excess)/float64(t1), "crit%")
	b.ReportMetric(float64(points)/float64(batches), "points/batch")
	b.ReportMetric(float64(short)/float64(b.N), "short-batches/run")
}

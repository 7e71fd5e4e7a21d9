package correlate

import (
	"context"
	"math"
	"runtime"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/mottledic/mottle/internal/heapwatch"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/spline"
	"github.com/mottledic/mottle/pkg/synth"
)

var benchPair struct {
	once     sync.Once
	ref, def *imageio.Gray
}

// benchImages renders the 1024×1024 benchmark pair once: 8-bit, noise σ = 1
// grey level, a small homogeneous strain with a translation.
func benchImages(b testing.TB) (ref, def *imageio.Gray) {
	benchPair.once.Do(func() {
		m := synth.Affine{F: [2][2]float64{{1.005, 0.002}, {-0.001, 0.997}}, CX: 512, CY: 512, U: 4.3, V: -2.6}
		benchPair.ref, benchPair.def = pair(b, m, 1024, 1024, 8, 1, 7)
	})
	return benchPair.ref, benchPair.def
}

// BenchmarkRun1024 is the reference benchmark of the project: a 1024×1024
// pair, subset 31, step 8, first order (about 15,600 grid points).
// It reports points/s, IC-GN iterations per point, allocations per point
// and the peak heap in bytes per image pixel (above the two input images,
// and in total).
func BenchmarkRun1024(b *testing.B) { benchRun(b, First, tuning{}) }

// BenchmarkRun1024Second is BenchmarkRun1024 with the second-order shape function.
func BenchmarkRun1024Second(b *testing.B) { benchRun(b, Second, tuning{}) }

// BenchmarkRun1024Direct is BenchmarkRun1024 interpolating from the spline
// coefficients instead of the coefficient table: the baseline of the table,
// to be measured in the same run.
func BenchmarkRun1024Direct(b *testing.B) { benchRun(b, First, tuning{direct: true}) }

// BenchmarkRun1024NoFetch is BenchmarkRun1024 without the prefetch of
// each point's subsets (prefetch.go): its baseline, to be measured in the
// same run.
func BenchmarkRun1024NoFetch(b *testing.B) { benchRun(b, First, tuning{noFetch: true}) }

// BenchmarkRun1024LongSpin is BenchmarkRun1024 with workers that check
// for work 16,384 times (some milliseconds), yielding to goroutines,
// instead of poolSpin times before they yield their core and sleep: a worker that sleeps halts its vCPU, and waking a
// halted vCPU of a virtual machine goes through the host's scheduler.
// Run beside BenchmarkRun1024 -cpu 2 on quiet cores: if this one is
// faster, the sleeps cost more than the spinning.
func BenchmarkRun1024LongSpin(b *testing.B) { benchRun(b, First, tuning{spin: 1 << 14}) }

// BenchmarkRun1024Yield is BenchmarkRun1024 with workers that, after their
// poolSpin goroutine yields, go on checking for work for up to 1 ms with
// sched_yield between checks before they sleep: the trial of that wait, to
// be run beside BenchmarkRun1024 -cpu 2 in the same process (and on small
// pairs through scripts/bench -speed, where it lost).
func BenchmarkRun1024Yield(b *testing.B) { benchRun(b, First, tuning{yield: time.Millisecond}) }

// BenchmarkRun1024Series is BenchmarkRun1024 with the series defaults of
// pkg/series: quintic B-splines and a Gaussian prefilter of σ = 0.8 px.
func BenchmarkRun1024Series(b *testing.B) {
	benchRunOpt(b, Options{Subset: 31, Step: 8, Interp: spline.Quintic, Prefilter: 0.8}, tuning{})
}

func benchRun(b *testing.B, shape Shape, tun tuning) {
	benchRunOpt(b, Options{Subset: 31, Step: 8, Shape: shape}, tun)
}

func benchRunOpt(b *testing.B, opt Options, tun tuning) {
	ref, def := benchImages(b)
	runtime.GC()
	var ms runtime.MemStats
	runtime.ReadMemStats(&ms)
	base := ms.HeapAlloc
	inputs := uint64(len(ref.Pix)+len(def.Pix)) * 4
	b.ReportAllocs()
	b.ResetTimer()
	var points, iters, okPts int
	var peak uint64
	var mallocs uint64
	var cpu, wait time.Duration
	for b.Loop() {
		b.StopTimer()
		runtime.GC() // peak below counts this run's memory, not earlier garbage
		b.StartTimer()
		w0 := runqueueWait()
		c0 := cpuTime()
		runtime.ReadMemStats(&ms)
		m0 := ms.Mallocs
		stop := make(chan struct{})
		pk := heapwatch.Peak(stop)
		res, err := runWith(context.Background(), ref, def, opt, tun)
		close(stop)
		cpu += cpuTime() - c0
		wait += runqueueWait() - w0
		if err != nil {
			b.Fatal(err)
		}
		runtime.ReadMemStats(&ms)
		mallocs += ms.Mallocs - m0
		peak = max(peak, <-pk)
		for _, p := range res.Points {
			if p.Status != Outside {
				points++
			}
			if p.Status == OK {
				okPts++
				iters += p.Iter
			}
		}
	}
	b.StopTimer()
	px := float64(ref.W * ref.H)
	b.ReportMetric(float64(points)/b.Elapsed().Seconds(), "points/s")
	b.ReportMetric(float64(points)/cpu.Seconds(), "points/cpu-s")
	// cpus is the mean number of cores the run kept busy (CPU time over
	// wall time) and rqwait% the time its threads were ready but waiting
	// for a core, per cent of the wall time: a run on cores of its own
	// has rqwait% near 0, and only then are points/s and their 1→2-thread
	// ratio figures of the program rather than of the machine's load.
	b.ReportMetric(cpu.Seconds()/b.Elapsed().Seconds(), "cpus")
	b.ReportMetric(100*wait.Seconds()/b.Elapsed().Seconds(), "rqwait%")
	b.ReportMetric(float64(iters)/float64(okPts), "iter/point")
	b.ReportMetric(float64(mallocs)/float64(points), "allocs/point")
	b.ReportMetric(float64(peak-min(peak, base))/px, "peakB/px")
	b.ReportMetric(float64(peak-min(peak, base)+inputs)/px, "peakB/px+inputs")
}

// cpuTime returns the user plus system CPU time of the process. On a
// shared machine wall-clock points/s depend on the load; points per CPU
// second times the core count is the uncontended estimate.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

var solvePair struct {
	once     sync.Once
	ref, def *imageio.Gray
}

// BenchmarkSolve times the per-point work alone (prepare and IC-GN from
// the exact solution of the previous point of a row, as propagation does)
// on a 384×384 pair like BenchmarkRun1024's, for each inner path: CPU ns per point and
// per sample (one interpolated subset pixel of one iteration), one thread,
// and the mean over the points of each point's fastest time over the
// b.N rounds (min-ns/point), which filters out most of the interference of
// other processes on a shared machine.
func BenchmarkSolve(b *testing.B) {
	solvePair.once.Do(func() {
		m := synth.Affine{F: [2][2]float64{{1.005, 0.002}, {-0.001, 0.997}}, CX: 192, CY: 192, U: 4.3, V: -2.6}
		solvePair.ref, solvePair.def = pair(b, m, 384, 384, 8, 1, 7)
	})
	ref, def := solvePair.ref, solvePair.def
	for _, c := range []struct {
		name  string
		shape Shape
		tun   tuning
	}{
		{"first", First, tuning{}},
		{"first-portable", First, tuning{portable: true}}, // the same as first without GOEXPERIMENT=simd
		{"first-direct", First, tuning{direct: true}},
		{"first-rows", First, tuning{table: tableRows}},
		{"second", Second, tuning{}},
		{"second-direct", Second, tuning{direct: true}},
		{"second-rows", Second, tuning{table: tableRows}},
	} {
		b.Run(c.name, func(b *testing.B) {
			r, err := newRun(context.Background(), ref, def, Options{Subset: 31, Step: 8, Shape: c.shape, Threads: 1}, c.tun)
			if err != nil {
				b.Fatal(err)
			}
			defer r.stop()
			if err := r.tabulate(context.Background(), 1<<30); err != nil {
				b.Fatal(err)
			}
			s := r.solvers[0]
			var pts [][2]float64
			for y := 40.0; y <= 344; y += 24 {
				for x := 40.0; x <= 344; x += 8 {
					pts = append(pts, [2]float64{x, y})
				}
			}
			var p [12]float64
			var iters, n int
			best := make([]time.Duration, len(pts)) // fastest time of each point
			b.ResetTimer()
			c0 := cpuTime()
			for b.Loop() {
				for k, pt := range pts {
					t0 := time.Now()
					if s.prepare(pt[0], pt[1]) != OK {
						b.Fatal("prepare failed")
					}
					if k > 0 && pts[k-1][1] == pt[1] {
						p = Recentre(p, 8, 0)
					} else {
						p = [12]float64{U: 4.3, V: -2.6}
					}
					a := s.solve(p)
					if a.status != OK {
						b.Fatal(a.status)
					}
					if d := time.Since(t0); best[k] == 0 || d < best[k] {
						best[k] = d
					}
					p = a.p
					iters += a.iter
					n++
				}
			}
			var sum time.Duration
			for _, d := range best {
				sum += d
			}
			b.ReportMetric(float64(sum.Nanoseconds())/float64(len(pts)), "min-ns/point")
			ns := float64((cpuTime() - c0).Nanoseconds())
			b.ReportMetric(ns/float64(n), "cpu-ns/point")
			b.ReportMetric(ns/float64(iters*s.n), "cpu-ns/sample")
			b.ReportMetric(float64(iters)/float64(n), "iter/point")
		})
	}
}

// BenchmarkSeedSearch times the integer search at a seed (subset 31,
// radius 40, on GOMAXPROCS threads as in a Run: -cpu 1,2 for both) on the
// BenchmarkRun1024 pair: ns per shift tried (wall and CPU). BenchmarkSeedSearchDirect forces the direct dot
// products, the baseline of the FFT path, to be measured in the same run.
func BenchmarkSeedSearch(b *testing.B)       { benchSeedSearch(b, false) }
func BenchmarkSeedSearchDirect(b *testing.B) { benchSeedSearch(b, true) }

func benchSeedSearch(b *testing.B, direct bool) {
	ref, def := benchImages(b)
	const m, x, y, r = 15, 512, 512, 40
	side := 2*m + 1
	t := make([]float64, side*side)
	var sum, ss float64
	for j := 0; j < side; j++ {
		for i := 0; i < side; i++ {
			v := float64(ref.Pix[(y-m+j)*ref.Stride+x-m+i])
			t[j*side+i] = v
			sum += v
		}
	}
	for k := range t {
		t[k] -= sum / float64(len(t))
		ss += t[k] * t[k]
	}
	for k := range t {
		t[k] /= math.Sqrt(ss)
	}
	var sr searchResult
	c0 := cpuTime()
	for b.Loop() {
		sr, _ = searchWith(context.Background(), def, t, m, x, y, r, runtime.GOMAXPROCS(0), direct)
	}
	cpu := cpuTime() - c0
	if !sr.ok || sr.du != 4 && sr.du != 5 {
		b.Fatalf("search found (%d, %d)", sr.du, sr.dv)
	}
	shifts := float64(b.N * (2*r + 1) * (2*r + 1))
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/shifts, "ns/shift")
	b.ReportMetric(float64(cpu.Nanoseconds())/shifts, "cpu-ns/shift")
}

// BenchmarkRun1024Rows and BenchmarkRun1024SecondRows are BenchmarkRun1024
// and BenchmarkRun1024Second with the row table (spline.RowTable), and
// BenchmarkRun1024Cells and BenchmarkRun1024SecondCells with the bicubic
// table (spline.Table), whichever the build uses by default: the two
// tables compared in one binary.
func BenchmarkRun1024Rows(b *testing.B)        { benchRun(b, First, tuning{table: tableRows}) }
func BenchmarkRun1024SecondRows(b *testing.B)  { benchRun(b, Second, tuning{table: tableRows}) }
func BenchmarkRun1024Cells(b *testing.B)       { benchRun(b, First, tuning{table: tableCells}) }
func BenchmarkRun1024SecondCells(b *testing.B) { benchRun(b, Second, tuning{table: tableCells}) }

// BenchmarkRun1024SeriesDirect is BenchmarkRun1024Series without the
// quintic row table (the spline evaluated directly): its baseline in the
// same binary.
func BenchmarkRun1024SeriesDirect(b *testing.B) {
	benchRunOpt(b, Options{Subset: 31, Step: 8, Interp: spline.Quintic, Prefilter: 0.8}, tuning{direct: true})
}

package correlate

import (
	"runtime"
	"sync"
	"sync/atomic"
	"time"
)

// The worker pool. Batches of items are computed by the goroutine that
// forms them and by threads−1 helper goroutines, each with its own solver.
// Two batches can be in flight: while the helpers compute one, the caller
// accepts the previous one and forms the next, and it computes items too
// whenever it waits. Items are handed out one at a time, in batch order,
// through one atomic cursor, so fast workers take more; the schedule
// changes which goroutine computes an item, never what it computes.
//
// A helper that finds nothing to do checks again poolSpin times, yielding
// to other goroutines in between (some 10–50 µs when nothing else runs),
// then sleeps. tuning.yield can make it go on checking for a while first,
// yielding its core to other processes in between (sched_yield on Linux):
// on idle cores that keeps the thread from halting its vCPU between
// batches (waking a sleeping thread on another core costs 60 µs to 1 ms on
// the 2-core virtual machine), and BenchmarkRun1024Yield measured 0.96–1.39×
// with 1 ms of it. It is not the default (poolYield < 0) because on small
// runs it costs far more than it saves: on scripts/bench's pairs (1,521–1,600
// points), two threads gave 14,366–37,571 points/s with 1 ms of yielding
// against 40,151–45,882 without, and 7,970–19,244 points per CPU-second
// against 21,722–24,665, in the same session (GOAMD64=v3 build). The caller
// likewise spins before it sleeps.
const (
	poolSpin  = 64
	poolYield = -1 // no yielding of the core by default (see above)
)

// cursor packs the generation of the batch being handed out (upper 32
// bits), its length (next 16) and its next item (lower 16). One
// compare-and-swap takes an item of that batch and nothing else: a worker
// that read an older cursor fails it.
const (
	cursorGenShift = 32
	cursorLenShift = 16
	cursorMask     = 1<<16 - 1
	maxBatch       = cursorMask // longest batch the cursor can describe
)

// pool is the synchronisation state of the worker pool. Batch g lives in
// slot g%2 until it has been awaited; slot writes happen only then, and
// workers read a slot only while they hold one of its items.
type pool struct {
	cursor   atomic.Uint64
	pub      atomic.Uint64 // newest published generation
	n        [2]atomic.Int64
	left     [2]atomic.Int64 // items of each slot's batch not yet finished
	items    [2][]item
	fn       [2]func(k int) // a batch of set-up parts instead of items (shareOut), nil: items
	trace    [2]*traceBatch
	gen      uint64 // newest published generation (caller only)
	awaited  uint64 // newest generation awaited (caller only)
	closed   atomic.Bool
	sleepers atomic.Int32 // helpers waiting on cond
	sleeps   atomic.Int64 // times a helper went to sleep (for traces)
	slept    atomic.Int64 // nanoseconds helpers spent asleep (for traces)
	spun     atomic.Int64 // nanoseconds spent spinning, all goroutines (for traces)
	waits    int64        // times the caller went to sleep (for traces)
	waited   int64        // nanoseconds the caller spent asleep (for traces)
	mu       sync.Mutex
	cond     sync.Cond
	waitGen  atomic.Uint64 // generation the caller sleeps on, 0: none
	done     chan struct{} // capacity 1
}

func (p *pool) init() {
	p.cond.L = &p.mu
	p.done = make(chan struct{}, 1)
}

// take returns an item to compute: its generation and index.
func (p *pool) take() (uint64, int, bool) {
	for {
		c := p.cursor.Load()
		g, k, n := c>>cursorGenShift, c&cursorMask, c>>cursorLenShift&cursorMask
		if k < n {
			if p.cursor.CompareAndSwap(c, c+1) {
				return g, int(k), true
			}
			continue
		}
		if p.pub.Load() <= g {
			return 0, 0, false
		}
		// Batch g is handed out and g+1 is published: move on to it.
		nn := uint64(p.n[(g+1)%2].Load())
		p.cursor.CompareAndSwap(c, (g+1)<<cursorGenShift|nn<<cursorLenShift)
	}
}

// available reports whether take could succeed.
func (p *pool) available() bool {
	c := p.cursor.Load()
	return c&cursorMask < c>>cursorLenShift&cursorMask || p.pub.Load() > c>>cursorGenShift
}

// finished records the end of an item of generation g; the last one wakes
// the caller if it sleeps on g.
func (p *pool) finished(g uint64) {
	if p.left[g%2].Add(-1) == 0 && p.waitGen.CompareAndSwap(g, 0) {
		p.done <- struct{}{}
	}
}

// sleep parks a helper until an item is available or the pool is closed,
// which it reports.
func (p *pool) sleep() bool {
	t0 := time.Now()
	p.mu.Lock()
	defer p.mu.Unlock()
	p.sleepers.Add(1)
	p.sleeps.Add(1)
	defer func() {
		p.sleepers.Add(-1)
		p.slept.Add(int64(time.Since(t0)))
	}()
	for {
		if p.closed.Load() {
			return false
		}
		if p.available() {
			return true
		}
		p.cond.Wait()
	}
}

// publish makes items the next generation's batch, wakes sleeping helpers
// and returns the generation.
func (p *pool) publish(items []item, tb *traceBatch) uint64 {
	return p.publishN(items, nil, len(items), tb)
}

// publishN makes the next generation's batch n items, or with fn not nil
// the n calls fn(0) … fn(n−1), wakes sleeping helpers and returns the
// generation.
func (p *pool) publishN(items []item, fn func(int), n int, tb *traceBatch) uint64 {
	g := p.gen + 1
	if g > p.awaited+2 {
		panic("correlate: a third batch in flight would overwrite the oldest")
	}
	p.gen = g
	if fn == nil {
		p.items[g%2] = items
	}
	p.fn[g%2], p.trace[g%2] = fn, tb
	p.left[g%2].Store(int64(n))
	p.n[g%2].Store(int64(n))
	p.pub.Store(g)
	if p.sleepers.Load() > 0 {
		p.mu.Lock()
		p.cond.Broadcast()
		p.mu.Unlock()
	}
	return g
}

func (p *pool) close() {
	p.closed.Store(true)
	p.mu.Lock()
	p.cond.Broadcast()
	p.mu.Unlock()
}

// spin returns how many times a worker checks for work, yielding to other
// goroutines in between, before it yields its core: poolSpin, or
// tuning.spin when set.
func (r *run) spin() int {
	if r.tun.spin > 0 {
		return r.tun.spin
	}
	return poolSpin
}

// idle is what a worker does at its i-th check in a row that found no
// work, the first at t0: it yields (to goroutines for the first spin()
// checks, then its core for up to poolYield, or tuning.yield) and returns
// false, or returns true when the worker should sleep.
func (r *run) idle(i int, t0 time.Time) bool {
	if i <= r.spin() {
		runtime.Gosched()
		return false
	}
	d := r.tun.yield
	if d == 0 {
		d = poolYield
	}
	if d < 0 || time.Since(t0) > d {
		return true
	}
	osYield()
	return false
}

// stop ends the helper goroutines.
func (r *run) stop() { r.pool.close() }

// compute1 computes item (or part) k of generation g with solver w and
// records it as finished.
func (r *run) compute1(g uint64, k, w int) {
	p := &r.pool
	if fn := p.fn[g%2]; fn != nil {
		if tb := p.trace[g%2]; tb == nil {
			fn(k)
		} else {
			tr := r.tun.trace
			t := tr.now()
			fn(k)
			tb.cost[k] = tr.now() - t
			tb.w[w].busy += tb.cost[k]
			tb.w[w].n++
		}
		p.finished(g)
		return
	}
	it := &p.items[g%2][k]
	if tb := p.trace[g%2]; tb == nil {
		r.compute(r.solvers[w], w, it)
	} else {
		tr := r.tun.trace
		tw := &tb.w[w]
		t := tr.now()
		if tw.n == 0 {
			tw.first = t
		}
		var w0 time.Duration
		if tr.clock != nil {
			w0 = time.Since(tr.t0)
		}
		r.compute(r.solvers[w], w, it)
		tw.last = tr.now()
		if tr.clock != nil {
			tb.item[k] = traceItem{idx: it.idx, w: int32(w), t0: w0, t1: time.Since(tr.t0)}
		}
		tb.cost[k] = tw.last - t
		tw.busy += tb.cost[k]
		tw.n++
	}
	p.finished(g)
}

// worker is helper w: it computes items with solver w until the pool
// closes.
func (r *run) worker(w int) {
	p := &r.pool
	if tr := r.tun.trace; tr != nil && tr.clock != nil {
		// A thread clock times an item only if the goroutine stays on
		// its thread.
		runtime.LockOSThread()
		defer runtime.UnlockOSThread()
	}
	for {
		if g, k, ok := p.take(); ok {
			r.compute1(g, k, w)
			continue
		}
		t0 := time.Now()
		for i := 1; !p.available(); i++ {
			if p.closed.Load() {
				return
			}
			if r.idle(i, t0) {
				p.spun.Add(int64(time.Since(t0)))
				if !p.sleep() {
					return
				}
				t0 = time.Now()
				break
			}
		}
		p.spun.Add(int64(time.Since(t0)))
	}
}

// nextBatch returns the empty slice to form the next batch in; it does not
// share memory with a batch in flight.
func (r *run) nextBatch() []item {
	return r.pool.items[(r.pool.gen+1)%2][:0]
}

// startBatch hands out items (at most maxBatch, from nextBatch) and
// returns their generation, for awaitBatch.
func (r *run) startBatch(items []item) uint64 {
	if len(items) > maxBatch {
		panic("correlate: batch longer than the pool's cursor can hold")
	}
	var tb *traceBatch
	if tr := r.tun.trace; tr != nil {
		tr.batches = append(tr.batches, &traceBatch{n: len(items), send: tr.now(),
			w: make([]traceWorker, r.threads), cost: make([]time.Duration, len(items)), item: make([]traceItem, len(items))})
		tb = tr.batches[len(tr.batches)-1]
	}
	return r.pool.publish(items, tb)
}

// awaitBatch computes items (of batch g or a later one) on the calling
// goroutine until every item of batch g has finished, and returns them.
func (r *run) awaitBatch(g uint64) []item {
	p := &r.pool
	left := &p.left[g%2]
	t0 := time.Now()
	for i := 1; left.Load() != 0; i++ {
		if gg, k, ok := p.take(); ok {
			if i > 1 {
				p.spun.Add(int64(time.Since(t0)))
			}
			r.compute1(gg, k, 0)
			t0, i = time.Now(), 0
			continue
		}
		if r.idle(i, t0) {
			p.spun.Add(int64(time.Since(t0)))
			p.waits++
			p.waitGen.Store(g)
			if left.Load() == 0 && p.waitGen.CompareAndSwap(g, 0) {
				break
			}
			t1 := time.Now()
			<-p.done
			p.waited += int64(time.Since(t1))
			break
		}
	}
	if tb := p.trace[g%2]; tb != nil {
		tb.done = r.tun.trace.now()
	}
	p.awaited = max(p.awaited, g)
	return p.items[g%2]
}

// shareOut calls fn(0) … fn(n−1) on the pool (the caller and the
// threads−1 helpers, each taking the next part when it is free) and
// returns when all have finished: the steps of the set-up, which so use
// no goroutines beyond the pool's. With a trace it records each part's
// time as a region.
func (r *run) shareOut(n int, fn func(k int)) {
	if n > maxBatch {
		panic("correlate: more parts than the pool's cursor can hold")
	}
	var tb *traceBatch
	if tr := r.tun.trace; tr != nil {
		tr.regions = append(tr.regions, &traceBatch{n: n, send: tr.now(), w: make([]traceWorker, r.threads), cost: make([]time.Duration, n)})
		tb = tr.regions[len(tr.regions)-1]
	}
	r.awaitBatch(r.pool.publishN(nil, fn, n, tb))
}

// runBatch computes items and returns them when all have finished.
func (r *run) runBatch(items []item) []item { return r.awaitBatch(r.startBatch(items)) }

package correlate

import (
	"runtime"
	"sync"
	"sync/atomic"
	"time"
)

// The worker pool. A batch (run.items) is computed by the goroutine that
// calls runBatch and by threads−1 helper goroutines, each with its own
// solver. Items are handed out one at a time through a single atomic
// cursor, so the fast ones take more; the schedule changes which goroutine
// computes an item, never what it computes.
//
// Between batches the reliability-guided loop accepts the results and
// forms the next batch, a few tens of microseconds of serial work. Helpers
// that run out of items spin for up to poolSpin, yielding to other
// goroutines, before they sleep: waking a sleeping thread on another core
// costs as much as that gap or more (60 µs to 1 ms measured on the 2-core
// virtual machine), and a pool that put every worker to sleep after every
// batch of 64 points paid it twice per batch. The caller computes items
// too, and spins for the last ones before it sleeps.
const poolSpin = 200 * time.Microsecond

// cursor packs the batch generation (upper 32 bits), the batch length
// (next 16) and the next item to hand out (lower 16). One compare-and-swap
// takes an item of the current batch and nothing else: a helper that is
// late from an earlier batch fails it, because the generation moved.
const (
	cursorGenShift = 32
	cursorLenShift = 16
	cursorMask     = 1<<16 - 1
	maxBatch       = cursorMask // longest batch the cursor can describe
)

// pool is the synchronisation state of the worker pool.
type pool struct {
	cursor   atomic.Uint64
	left     atomic.Int64 // items of the current batch not yet finished
	closed   atomic.Bool
	sleepers atomic.Int32 // helpers waiting on cond
	sleeps   atomic.Int64 // times a helper went to sleep (for traces)
	waits    int64        // times the caller went to sleep (for traces)
	mu       sync.Mutex
	cond     sync.Cond
	waiting  atomic.Bool   // the caller sleeps until done is signalled
	done     chan struct{} // capacity 1
	gen      uint64        // generation of the current batch (caller only)
}

func (p *pool) init() {
	p.cond.L = &p.mu
	p.done = make(chan struct{}, 1)
}

// take returns the next item of generation gen, or false when that
// batch has no item left to hand out or a newer one is current.
func (p *pool) take(gen uint64) (int, bool) {
	for {
		c := p.cursor.Load()
		k, n := c&cursorMask, c>>cursorLenShift&cursorMask
		if c>>cursorGenShift != gen || k >= n {
			return 0, false
		}
		if p.cursor.CompareAndSwap(c, c+1) {
			return int(k), true
		}
	}
}

// finished records the end of one item; the last one wakes the caller if
// it sleeps.
func (p *pool) finished() {
	if p.left.Add(-1) == 0 && p.waiting.CompareAndSwap(true, false) {
		p.done <- struct{}{}
	}
}

// await waits for a generation newer than seen with items to hand out and
// returns it, or false once the pool is closed.
func (p *pool) await(seen uint64) (uint64, bool) {
	ready := func() (uint64, bool) {
		c := p.cursor.Load()
		g := c >> cursorGenShift
		return g, g != seen && c&cursorMask < c>>cursorLenShift&cursorMask
	}
	t0 := time.Now()
	for i := 0; ; i++ {
		if p.closed.Load() {
			return 0, false
		}
		if g, ok := ready(); ok {
			return g, true
		}
		if i%16 == 15 && time.Since(t0) > poolSpin {
			break
		}
		runtime.Gosched()
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	p.sleepers.Add(1)
	p.sleeps.Add(1)
	defer p.sleepers.Add(-1)
	for {
		if p.closed.Load() {
			return 0, false
		}
		if g, ok := ready(); ok {
			return g, true
		}
		p.cond.Wait()
	}
}

// publish makes items [0, n) of the next generation available and wakes
// sleeping helpers.
func (p *pool) publish(n int) uint64 {
	p.gen++
	p.left.Store(int64(n))
	p.cursor.Store(p.gen<<cursorGenShift | uint64(n)<<cursorLenShift)
	if p.sleepers.Load() > 0 {
		p.mu.Lock()
		p.cond.Broadcast()
		p.mu.Unlock()
	}
	return p.gen
}

// wait returns when every item of the current batch has finished.
func (p *pool) wait() {
	t0 := time.Now()
	for i := 0; p.left.Load() != 0; i++ {
		if i%16 == 15 && time.Since(t0) > poolSpin {
			p.waits++
			p.waiting.Store(true)
			if p.left.Load() == 0 && p.waiting.CompareAndSwap(true, false) {
				return
			}
			<-p.done
			return
		}
		runtime.Gosched()
	}
}

func (p *pool) close() {
	p.closed.Store(true)
	p.mu.Lock()
	p.cond.Broadcast()
	p.mu.Unlock()
}

// stop ends the helper goroutines.
func (r *run) stop() {
	if r.threads > 1 {
		r.pool.close()
	}
}

// worker is helper w: it computes items of each batch with solver w.
func (r *run) worker(w int) {
	var seen uint64
	for {
		g, ok := r.pool.await(seen)
		if !ok {
			return
		}
		seen = g
		r.drain(g, w)
	}
}

// drain computes items of generation gen with solver w until none is left
// to hand out.
func (r *run) drain(gen uint64, w int) {
	s := r.solvers[w]
	tr := r.tun.trace
	for {
		k, ok := r.pool.take(gen)
		if !ok {
			return
		}
		if tr == nil {
			r.compute(s, w, &r.items[k])
		} else {
			b := &tr.batches[len(tr.batches)-1]
			tw := &b.w[w]
			t := tr.now()
			if tw.n == 0 {
				tw.first = t
			}
			r.compute(s, w, &r.items[k])
			tw.last = tr.now()
			b.cost[k] = tw.last - t
			tw.busy += b.cost[k]
			tw.n++
		}
		r.pool.finished()
	}
}

// runBatch computes r.items (at most maxBatch) on the calling goroutine
// and the helpers, and returns when all are done.
func (r *run) runBatch() {
	tr := r.tun.trace
	if tr != nil {
		tr.batches = append(tr.batches, traceBatch{n: len(r.items), send: tr.now(),
			w: make([]traceWorker, r.threads), cost: make([]time.Duration, len(r.items))})
		defer func() { tr.batches[len(tr.batches)-1].done = tr.now() }()
	}
	if len(r.items) == 0 {
		return
	}
	if len(r.items) > maxBatch {
		panic("correlate: batch longer than the pool's cursor can hold")
	}
	g := r.pool.publish(len(r.items))
	r.drain(g, 0)
	r.pool.wait()
}

package correlate

import "time"

// poolTrace records, for benchmarks, when each phase of a run ended and
// how each batch of the worker pool was spent: when it was handed out,
// when every worker started and finished its share, and the time inside
// compute. It is filled only when tuning.trace is set; it never changes a
// result.
type poolTrace struct {
	t0      time.Time
	clock   func() time.Duration // time source; nil: time.Since(t0)
	phases  []tracePhase
	batches []*traceBatch
	regions []*traceBatch // the set-up steps shared out on the pool (shareOut), each part's time in cost
	sleeps  int64         // times a helper went to sleep waiting for a batch
	waits   int64         // times the caller went to sleep waiting for the last items
	slept   time.Duration // time helpers spent asleep, from going to sleep to running again
	waited  time.Duration // the same for the caller
	spun    time.Duration // time spent spinning for work, all goroutines
}

func (t *poolTrace) now() time.Duration {
	if t.clock != nil {
		return t.clock()
	}
	return time.Since(t.t0)
}

// tracePhase is the end of one phase of a run, from the start of the run.
type tracePhase struct {
	name string
	at   time.Duration
}

// traceBatch is one batch: its size, when it was handed out and when the
// last worker reported, and each worker's share.
type traceBatch struct {
	n          int
	send, done time.Duration
	w          []traceWorker
	cost       []time.Duration // time of each item, in batch order
	item       []traceItem     // each item's point, worker and wall-clock span (clocked traces only)
}

// traceItem is one item of a clocked trace: its point, the worker that
// computed it and when, by the wall clock, from the start of the run.
type traceItem struct {
	idx    int32
	w      int32
	t0, t1 time.Duration
}

// traceWorker is one worker's share of a batch: the start of its first
// item, the end of its last, the time inside compute and the item count.
type traceWorker struct {
	first, last, busy time.Duration
	n                 int
}

func (t *poolTrace) mark(name string) {
	if t != nil {
		t.phases = append(t.phases, tracePhase{name, t.now()})
	}
}

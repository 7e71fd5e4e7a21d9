package correlate

import (
	"context"
	"fmt"
	"math"
)

// Reliability-guided propagation (Pan 2009, "Reliability-guided digital
// image correlation for image deformation measurement", Appl. Opt.
// 48(8):1535): after the seeds, the uncomputed point next to the best
// converged point (highest ZNCC) is computed next, starting from that
// neighbour's solution, so that poor matches are reached last and cannot
// spoil good ones.
//
// To use every core and still give results that do not depend on the number
// of goroutines, points are taken from the priority queue in batches of
// batchSize. Batch k is formed from the state left by batches 1 to k−2 only
// (batch k−1 is still being computed then), each of its points starts
// from its best already-converged neighbours (in order of ZNCC, then
// index), and the points of a batch are independent of each other, so any
// schedule computes the same numbers. The batch size is a constant, never
// derived from the thread count.
const batchSize = 64

// Point states during a run.
const (
	stOutside = iota // subset not wholly inside the ROI: never computed
	stPending        // computable, not yet computed
	stQueued         // in the current batch
	stDone           // computed, Status OK: may start its neighbours
	stFailed         // computed, rejected
)

// item is one point to compute in a batch.
type item struct {
	idx      int32
	nnb      int8
	nb       [4]int32 // neighbours to start from, best first
	hasStart bool
	search   bool // integer search first (RunPoints without a guess)
	start    [12]float64
	x, y     float64
}

// before orders starting neighbours: higher ZNCC first, then lower index.
func (r *run) before(a, b int32) bool {
	za, zb := r.pts[a].ZNCC, r.pts[b].ZNCC
	if za != zb {
		return za > zb
	}
	return a < b
}

// neighbours returns the 4-connected grid neighbours of point k.
func (r *run) neighbours(k int, out *[4]int32) int {
	g := r.grid
	i, j := k%g.Nx, k/g.Nx
	n := 0
	if i > 0 {
		out[n] = int32(k - 1)
		n++
	}
	if i+1 < g.Nx {
		out[n] = int32(k + 1)
		n++
	}
	if j > 0 {
		out[n] = int32(k - g.Nx)
		n++
	}
	if j+1 < g.Ny {
		out[n] = int32(k + g.Nx)
		n++
	}
	return n
}

// accept records the outcome of a computed point and queues its pending
// neighbours if it was accepted.
func (r *run) accept(k int, q *queue, key []float64) {
	if r.pts[k].Status != OK {
		r.state[k] = stFailed
		return
	}
	r.state[k] = stDone
	var nb [4]int32
	z := r.pts[k].ZNCC
	for _, x := range nb[:r.neighbours(k, &nb)] {
		if r.state[x] == stPending && z > key[x] {
			key[x] = z
			q.push(z, x)
		}
	}
}

// formBatch takes up to batchSize pending points off the queue, best
// first, each with its converged neighbours to start from, best first
// (ZNCC descending, then index), and marks them queued.
func (r *run) formBatch(q *queue, key []float64) []item {
	items := r.nextBatch()
	for q.len() > 0 && len(items) < batchSize {
		kk, x := q.pop()
		if r.state[x] != stPending || kk < key[x] {
			continue
		}
		r.state[x] = stQueued
		it := item{idx: x, x: r.pts[x].X, y: r.pts[x].Y}
		var nb [4]int32
		for _, y := range nb[:r.neighbours(int(x), &nb)] {
			if r.state[y] == stDone {
				it.nb[it.nnb] = y
				it.nnb++
			}
		}
		for a := 1; a < int(it.nnb); a++ {
			for b := a; b > 0 && r.before(it.nb[b], it.nb[b-1]); b-- {
				it.nb[b], it.nb[b-1] = it.nb[b-1], it.nb[b]
			}
		}
		items = append(items, it)
	}
	return items
}

// propagateAll runs the start guesses, the seeds, the reliability-guided
// propagation and, while a sizeable part of the ROI is still unreached,
// automatic re-seeding in it.
func (r *run) propagateAll(ctx context.Context, seeds []int) error {
	n := len(r.pts)
	total := 0
	for _, s := range r.state {
		if s == stPending {
			total++
		}
	}
	done := 0
	progress := func() {
		if r.opt.Progress != nil {
			r.opt.Progress(done, total)
		}
	}
	progress()
	var q queue
	key := make([]float64, n)
	for i := range key {
		key[i] = math.Inf(-1)
	}

	// Start guesses: independent points, in chunks for progress reports.
	if r.opt.Start != nil {
		var idx []int
		for k := range r.pts {
			if r.state[k] == stPending && r.opt.Start[k].Status == OK {
				idx = append(idx, k)
			}
		}
		const chunk = 16 * batchSize
		for c := 0; c < len(idx); c += chunk {
			if err := ctx.Err(); err != nil {
				return fmt.Errorf("correlate: %w", err)
			}
			items := r.nextBatch()
			for _, k := range idx[c:min(c+chunk, len(idx))] {
				items = append(items, item{idx: int32(k), hasStart: true, start: r.opt.Start[k].P, x: r.pts[k].X, y: r.pts[k].Y})
			}
			for _, it := range r.runBatch(items) {
				k := int(it.idx)
				if r.pts[k].Status == OK {
					done++
				}
			}
			progress()
		}
		// Accepted points seed propagation; the rest are retried from neighbours.
		for _, k := range idx {
			if r.pts[k].Status == OK {
				r.accept(k, &q, key)
			} else {
				r.pts[k] = Point{X: r.pts[k].X, Y: r.pts[k].Y}
			}
		}
	}

	// Seeds, when nothing is known yet.
	if q.len() == 0 && done == 0 {
		if len(seeds) == 0 {
			if err := r.autoSeed(ctx, &q, key, &done); err != nil {
				return err
			}
		}
		for _, k := range seeds {
			if r.state[k] != stPending {
				continue
			}
			if err := r.seed(ctx, k, false); err != nil {
				return err
			}
			done++
			r.accept(k, &q, key)
		}
		progress()
	}
	r.tun.trace.mark("seeds")

	tried := map[int]bool{}
	for {
		// Batch k is formed from the state left by batches up to k−2 and
		// computed while batch k−1 is accepted and k+1 formed, so that
		// the workers never wait for that serial step. Which batch a point
		// falls in, and so its starting neighbours, depends on the queue
		// alone.
		var inflight uint64 // generation of the batch in flight, 0: none
		for {
			if err := ctx.Err(); err != nil {
				if inflight != 0 {
					r.awaitBatch(inflight)
				}
				return fmt.Errorf("correlate: %w", err)
			}
			items := r.formBatch(&q, key)
			if len(items) == 0 && inflight == 0 {
				break
			}
			var g uint64
			if len(items) > 0 {
				g = r.startBatch(items)
			}
			if inflight != 0 {
				its := r.awaitBatch(inflight)
				for _, it := range its {
					r.accept(int(it.idx), &q, key)
				}
				done += len(its)
				progress()
			}
			inflight = g
		}
		// Re-seed a separate piece of the ROI that propagation could not
		// reach because no computed point touches it. Pockets enclosed by
		// rejected points are left unreached: they are where matching is poor.
		comp := r.untouchedComponent(tried)
		if comp < 0 {
			break
		}
		tried[comp] = true
		for i, k := range r.seedCandidates(comp) {
			if i == 3 {
				break
			}
			if err := r.seed(ctx, k, true); err != nil {
				return err
			}
			done++
			r.accept(k, &q, key)
			if r.pts[k].Status == OK {
				break
			}
		}
		progress()
	}
	for k, s := range r.state {
		if s == stPending {
			r.pts[k].Status = Unreached
		}
	}
	done = total
	progress()
	return nil
}

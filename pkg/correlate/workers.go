package correlate

import (
	"context"
	"math"
	"sync"
)

// parallelFor splits [0, n) into contiguous blocks, one per goroutine, up
// to threads of them, and waits for f to finish on all. Each index is
// handled by exactly one call.
func parallelFor(n, threads int, f func(i0, i1 int)) {
	threads = min(threads, n)
	if threads <= 1 {
		f(0, n)
		return
	}
	var wg sync.WaitGroup
	for t := 0; t < threads; t++ {
		i0, i1 := n*t/threads, n*(t+1)/threads
		wg.Go(func() { f(i0, i1) })
	}
	wg.Wait()
}

// classify applies the ZNCC threshold to a converged attempt.
func (r *run) classify(a *attempt) {
	if a.status == OK && a.zncc < r.opt.MinZNCC {
		a.status = LowZNCC
	}
}

// better reports whether attempt a should replace b as a point's result.
func better(a, b *attempt) bool {
	rank := func(s Status) int {
		switch s {
		case OK:
			return 2
		case LowZNCC:
			return 1
		}
		return 0
	}
	if rank(a.status) != rank(b.status) {
		return rank(a.status) > rank(b.status)
	}
	return a.status == OK && a.zncc > b.zncc
}

// compute solves one item, trying its starting guesses in order until one
// is accepted, and stores the best attempt.
func (r *run) compute(s *solver, w int, it *item) {
	pt := &r.pts[it.idx]
	pt.X, pt.Y = it.x, it.y
	// Ask for both subsets' memory first (prefetch.go), the deformed one
	// where the first guess puts it.
	switch {
	case r.tun.noFetch:
	case it.hasStart:
		s.prefetch(it.x, it.y, &it.start)
	case it.nnb > 0:
		nb := &r.pts[it.nb[0]]
		p0 := Recentre(nb.P, it.x-nb.X, it.y-nb.Y)
		s.prefetch(it.x, it.y, &p0)
	default:
		s.prefetch(it.x, it.y, nil)
	}
	st := s.prepare(it.x, it.y)
	if st != OK {
		pt.Status = st
		return
	}
	r.hUU[it.idx], r.hVV[it.idx] = s.hUU, s.hVV
	var best attempt
	have := false
	try := func(p0 [12]float64) bool {
		a := s.solve(p0)
		r.classify(&a)
		if !have || better(&a, &best) {
			best, have = a, true
		}
		return a.status == OK
	}
	done := false
	if it.hasStart {
		done = try(it.start)
	}
	for k := 0; k < int(it.nnb) && !done; k++ {
		nb := &r.pts[it.nb[k]]
		done = try(Recentre(nb.P, it.x-nb.X, it.y-nb.Y))
	}
	if it.search && !done {
		t := r.tmpl[w]
		for k, v := range s.f {
			t[k] = v / s.df
		}
		cx, cy := int(math.Round(it.x)), int(math.Round(it.y))
		sr := searchInteger(context.Background(), r.def, t, s.m, cx, cy, r.opt.Search, 1)
		if sr.ok {
			var p0 [12]float64
			// The template is the reference around (x, y); it matched the
			// deformed image around (cx+du, cy+dv).
			p0[U], p0[V] = float64(cx+sr.du)-it.x, float64(cy+sr.dv)-it.y
			try(p0)
		}
	}
	if !have {
		pt.Status = Diverged
		return
	}
	pt.P, pt.ZNCC, pt.Iter, pt.Converged, pt.Status = best.p, best.zncc, best.iter, best.converged, best.status
	if best.status == OK {
		dof := float64(s.n - s.np - 2)
		r.s2[it.idx] = s.df * s.df * math.Max(1-best.zncc, 0) / dof
	}
}

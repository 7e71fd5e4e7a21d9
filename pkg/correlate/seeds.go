package correlate

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sort"
)

// seedIndices maps Options.Seeds to grid points (nearest computable point
// within two steps).
func (r *run) seedIndices() ([]int, error) {
	var out []int
	var errs []error
	g := r.grid
	for _, s := range r.opt.Seeds {
		if s[0] < 0 || s[1] < 0 || s[0] >= r.ref.W || s[1] >= r.ref.H {
			errs = append(errs, fmt.Errorf("correlate: seed (%d, %d) is outside the %d×%d image", s[0], s[1], r.ref.W, r.ref.H))
			continue
		}
		best, bestD := -1, math.Inf(1)
		ci := int(math.Round(float64(s[0]-g.X0) / float64(g.Step)))
		cj := int(math.Round(float64(s[1]-g.Y0) / float64(g.Step)))
		for j := cj - 2; j <= cj+2; j++ {
			for i := ci - 2; i <= ci+2; i++ {
				if i < 0 || j < 0 || i >= g.Nx || j >= g.Ny || r.state[g.Index(i, j)] != stPending {
					continue
				}
				x, y := g.At(i, j)
				d := math.Hypot(float64(x-s[0]), float64(y-s[1]))
				if d < bestD {
					best, bestD = g.Index(i, j), d
				}
			}
		}
		if best < 0 {
			errs = append(errs, fmt.Errorf("correlate: seed (%d, %d): no grid point near it has its subset inside the ROI; pick a point well inside the region", s[0], s[1]))
			continue
		}
		out = append(out, best)
	}
	return out, errors.Join(errs...)
}

// seedCandidates returns up to 25 pending grid points of component comp
// (−1: any) nearest to the centroid of those points, best textured first (largest
// min(Σfx², Σfy²), the sum of squared subset intensity gradients of Pan,
// Xie, Wang, Ding & Li 2008, Opt. Express 16:7037), ties by index.
func (r *run) seedCandidates(comp int) []int {
	var cx, cy, n float64
	in := func(k int) bool { return r.state[k] == stPending && (comp < 0 || int(r.comp[k]) == comp) }
	for k := range r.state {
		if in(k) {
			cx += r.pts[k].X
			cy += r.pts[k].Y
			n++
		}
	}
	if n == 0 {
		return nil
	}
	cx, cy = cx/n, cy/n
	type cand struct {
		k    int
		d, t float64
	}
	// The 25 nearest, nearest first, ties by index: kept sorted while
	// the points are scanned in index order, so a point enters only if it
	// is strictly nearer than the 25th (a full sort of every pending point
	// took about 3 ms of serial time per call on a 1024² grid).
	const keep = 25
	cs := make([]cand, 0, keep)
	for k := range r.state {
		if !in(k) {
			continue
		}
		dx, dy := r.pts[k].X-cx, r.pts[k].Y-cy
		c := cand{k: k, d: dx*dx + dy*dy}
		if len(cs) == keep {
			if c.d >= cs[keep-1].d {
				continue
			}
			cs = cs[:keep-1]
		}
		i := len(cs)
		cs = append(cs, c)
		for ; i > 0 && cs[i-1].d > c.d; i-- {
			cs[i] = cs[i-1]
		}
		cs[i] = c
	}
	s := r.solvers[0]
	for i := range cs {
		if s.prepare(r.pts[cs[i].k].X, r.pts[cs[i].k].Y) == OK {
			cs[i].t = s.sssig
		} else {
			cs[i].t = -1
		}
	}
	sort.SliceStable(cs, func(a, b int) bool { return cs[a].t > cs[b].t })
	out := make([]int, len(cs))
	for i, c := range cs {
		out[i] = c.k
	}
	return out
}

// autoSeed tries up to five automatic seeds until one is accepted.
func (r *run) autoSeed(ctx context.Context, q *queue, key []float64, done *int) error {
	for i, k := range r.seedCandidates(-1) {
		if i == 5 {
			break
		}
		if err := r.seed(ctx, k, true); err != nil {
			return err
		}
		*done++
		r.accept(k, q, key)
		if r.pts[k].Status == OK {
			return nil
		}
	}
	return nil
}

// seed computes grid point k from scratch: integer search within the
// search radius, then IC-GN from the found translation; if that is not
// accepted, IC-GN from rotated and scaled starting guesses (seedFallback).
// It records the attempt in r.seedLog and fails only on cancellation.
func (r *run) seed(ctx context.Context, k int, auto bool) error {
	s := r.solvers[0]
	pt := &r.pts[k]
	x, y := int(pt.X), int(pt.Y)
	log := Seed{Index: k, X: x, Y: y, Auto: auto}
	defer func() { r.seedLog = append(r.seedLog, log) }()
	if st := s.prepare(pt.X, pt.Y); st != OK {
		pt.Status = st
		return nil
	}
	r.hUU[k], r.hVV[k] = s.hUU, s.hVV
	t := r.tmpl[0]
	for i, v := range s.f {
		t[i] = v / s.df
	}
	sr := searchInteger(ctx, r.def, t, r.m, x, y, r.opt.Search, r.threads)
	if err := ctx.Err(); err != nil {
		return fmt.Errorf("correlate: %w", err)
	}
	log.DU, log.DV, log.SearchZNCC = sr.du, sr.dv, sr.zncc
	best := attempt{status: Diverged}
	if sr.ok {
		var p0 [12]float64
		p0[U], p0[V] = float64(sr.du), float64(sr.dv)
		best = s.solve(p0)
		r.classify(&best)
	}
	if best.status != OK {
		a, err := r.seedFallback(ctx, s, x, y, sr)
		if err != nil {
			return err
		}
		if better(&a, &best) {
			best = a
		}
	}
	pt.P, pt.ZNCC, pt.Iter, pt.Converged, pt.Status = best.p, best.zncc, best.iter, best.converged, best.status
	if best.status == OK {
		r.s2[k] = s.df * s.df * math.Max(1-best.zncc, 0) / float64(s.n-s.np-2)
	}
	log.OK = best.status == OK
	return nil
}

// seedFallback handles large rotations and stretches at a seed: the
// reference subset is warped by candidate gradients F = s·R(θ)
// (θ up to ±30°, s from 0.85 to 1.15), each warped template is searched
// near the plain search result (then, if needed, over the whole radius),
// and IC-GN starts from the best few matches. The solver s must be
// prepared at (x, y).
func (r *run) seedFallback(ctx context.Context, s *solver, x, y int, sr searchResult) (attempt, error) {
	type cand struct {
		F  [2][2]float64
		sr searchResult
	}
	var cands []cand
	for _, th := range []float64{0, 7.5, -7.5, 15, -15, 22.5, -22.5, 30, -30} {
		for _, sc := range []float64{1, 0.92, 1.08, 0.85, 1.15} {
			c, sn := math.Cos(th*math.Pi/180), math.Sin(th*math.Pi/180)
			cands = append(cands, cand{F: [2][2]float64{{sc * c, -sc * sn}, {sc * sn, sc * c}}})
		}
	}
	m := r.m
	side := 2*m + 1
	tmpl := make([]float64, s.n)
	best := attempt{status: Diverged}
	for pass := 0; pass < 2; pass++ {
		if pass == 0 && !sr.ok {
			continue
		}
		for i := range cands {
			if err := ctx.Err(); err != nil {
				return best, fmt.Errorf("correlate: %w", err)
			}
			F := cands[i].F
			det := F[0][0]*F[1][1] - F[0][1]*F[1][0]
			iF := [2][2]float64{{F[1][1] / det, -F[0][1] / det}, {-F[1][0] / det, F[0][0] / det}}
			var sum float64
			for j := 0; j < side; j++ {
				for k := 0; k < side; k++ {
					zx, zy := float64(k-m), float64(j-m)
					v := r.refSp.At(float64(x)+iF[0][0]*zx+iF[0][1]*zy, float64(y)+iF[1][0]*zx+iF[1][1]*zy)
					tmpl[j*side+k] = v
					sum += v
				}
			}
			mean := sum / float64(s.n)
			var ss float64
			for k := range tmpl {
				tmpl[k] -= mean
				ss += tmpl[k] * tmpl[k]
			}
			if !(ss > 0) {
				cands[i].sr = searchResult{}
				continue
			}
			norm := 1 / math.Sqrt(ss)
			for k := range tmpl {
				tmpl[k] *= norm
			}
			if pass == 0 {
				c := searchInteger(ctx, r.def, tmpl, m, x+sr.du, y+sr.dv, 4, 1)
				c.du += sr.du
				c.dv += sr.dv
				cands[i].sr = c
			} else {
				cands[i].sr = searchInteger(ctx, r.def, tmpl, m, x, y, r.opt.Search, r.threads)
			}
		}
		sort.SliceStable(cands, func(a, b int) bool {
			return cands[a].sr.ok && (!cands[b].sr.ok || cands[a].sr.zncc > cands[b].sr.zncc)
		})
		for i := 0; i < 4 && i < len(cands) && cands[i].sr.ok; i++ {
			c := cands[i]
			var p0 [12]float64
			p0[U], p0[V] = float64(c.sr.du), float64(c.sr.dv)
			p0[Ux], p0[Uy], p0[Vx], p0[Vy] = c.F[0][0]-1, c.F[0][1], c.F[1][0], c.F[1][1]-1
			a := s.solve(p0)
			r.classify(&a)
			if better(&a, &best) {
				best = a
			}
		}
		if best.status == OK {
			break
		}
	}
	return best, nil
}

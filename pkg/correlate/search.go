package correlate

import (
	"context"
	"fmt"
	"math"
	"sort"
	"sync"

	"github.com/mottledic/mottle/pkg/imageio"
)

// Integer-pixel ZNCC search: the template (a zero-mean, unit-norm subset)
// is compared with the deformed image at every integer shift within the
// search radius; the shift of largest ZNCC wins (ties: the first in row-major
// order). The window statistics come from summed-area tables, so the cost is
// one dot product per shift. ZNCC as in Pan, Xie & Wang 2010, "Equivalence of
// digital image correlation criteria for pattern matching", Appl. Opt. 49:5501.

// searchResult is the best integer shift of a template.
type searchResult struct {
	du, dv int
	zncc   float64
	ok     bool
}

// searchInteger finds the shift (du, dv), |du|, |dv| ≤ r, maximising the
// ZNCC of tmpl (side 2m+1, zero mean, unit norm) against img at centre
// (cx+du, cy+dv). Shifts that put the window off the image are skipped.
// Rows of shifts are split over up to threads goroutines; the result does
// not depend on threads.
func searchInteger(ctx context.Context, img *imageio.Gray, tmpl []float64, m, cx, cy, r, threads int) searchResult {
	side := 2*m + 1
	n := float64(side * side)
	dvLo, dvHi := max(-r, m-cy), min(r, img.H-1-m-cy)
	duLo, duHi := max(-r, m-cx), min(r, img.W-1-m-cx)
	if dvLo > dvHi || duLo > duHi {
		return searchResult{}
	}
	// Region of the image touched by any window, with summed-area tables.
	x0, x1 := cx+duLo-m, cx+duHi+m // inclusive
	y0, y1 := cy+dvLo-m, cy+dvHi+m
	rw, rh := x1-x0+1, y1-y0+1
	reg := make([]float64, rw*rh)
	s1 := make([]float64, (rw+1)*(rh+1))
	s2 := make([]float64, (rw+1)*(rh+1))
	for y := 0; y < rh; y++ {
		var a, b float64
		row := img.Pix[(y0+y)*img.Stride+x0:]
		for x := 0; x < rw; x++ {
			v := float64(row[x])
			reg[y*rw+x] = v
			a += v
			b += v * v
			s1[(y+1)*(rw+1)+x+1] = s1[y*(rw+1)+x+1] + a
			s2[(y+1)*(rw+1)+x+1] = s2[y*(rw+1)+x+1] + b
		}
	}
	rows := dvHi - dvLo + 1
	best := make([]searchResult, rows)
	work := func(r0, r1 int) {
		for ri := r0; ri < r1; ri++ {
			if ctx.Err() != nil {
				return
			}
			dv := dvLo + ri
			wy := cy + dv - m - y0 // window top row in reg
			b := searchResult{zncc: math.Inf(-1)}
			for du := duLo; du <= duHi; du++ {
				wx := cx + du - m - x0
				num := dot(tmpl, reg[wy*rw+wx:], side, rw)
				a := (rw + 1)
				sum := s1[(wy+side)*a+wx+side] - s1[wy*a+wx+side] - s1[(wy+side)*a+wx] + s1[wy*a+wx]
				sq := s2[(wy+side)*a+wx+side] - s2[wy*a+wx+side] - s2[(wy+side)*a+wx] + s2[wy*a+wx]
				den := sq - sum*sum/n
				if !(den > 0) {
					continue
				}
				z := num / math.Sqrt(den)
				if z > b.zncc {
					b = searchResult{du: du, dv: dv, zncc: z, ok: true}
				}
			}
			best[ri] = b
		}
	}
	if threads > rows {
		threads = rows
	}
	if threads <= 1 {
		work(0, rows)
	} else {
		var wg sync.WaitGroup
		for t := 0; t < threads; t++ {
			r0, r1 := rows*t/threads, rows*(t+1)/threads
			wg.Add(1)
			go func() { defer wg.Done(); work(r0, r1) }()
		}
		wg.Wait()
	}
	res := searchResult{zncc: math.Inf(-1)}
	for _, b := range best {
		if b.ok && b.zncc > res.zncc {
			res = b
		}
	}
	if ctx.Err() != nil {
		return searchResult{}
	}
	return res
}

// dot returns Σ t[j·side+i]·g[j·stride+i] over a side×side window, with
// four partial sums so that the additions do not wait on each other.
func dot(t, g []float64, side, stride int) float64 {
	var s0, s1, s2, s3 float64
	for j := 0; j < side; j++ {
		tr := t[j*side : j*side+side]
		gr := g[j*stride : j*stride+side]
		gr = gr[:len(tr)]
		i := 0
		for ; i+4 <= len(tr); i += 4 {
			s0 += tr[i] * gr[i]
			s1 += tr[i+1] * gr[i+1]
			s2 += tr[i+2] * gr[i+2]
			s3 += tr[i+3] * gr[i+3]
		}
		for ; i < len(tr); i++ {
			s0 += tr[i] * gr[i]
		}
	}
	return (s0 + s1) + (s2 + s3)
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
	var cs []cand
	for k := range r.state {
		if in(k) {
			dx, dy := r.pts[k].X-cx, r.pts[k].Y-cy
			cs = append(cs, cand{k: k, d: dx*dx + dy*dy})
		}
	}
	sort.Slice(cs, func(a, b int) bool {
		if cs[a].d != cs[b].d {
			return cs[a].d < cs[b].d
		}
		return cs[a].k < cs[b].k
	})
	cs = cs[:min(len(cs), 25)]
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

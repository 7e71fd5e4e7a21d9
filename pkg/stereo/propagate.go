package stereo

import (
	"context"
	"fmt"
	"math"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
)

// runCropped is correlate.RunPoints at the points ks of pts, on the part of
// the images that those subsets can reach (their reference subsets, the
// guesses' subsets and the integer search around each point, with a margin
// for the spline and the prefilter), so that the cost of preparing the
// images follows the points, not the image size. The B-spline prefilter's
// influence decays as 0.43ⁿ over n px (quintic; 0.27ⁿ cubic: Unser 1999,
// "Splines: a perfect fit for signal and image processing", IEEE Signal
// Process. Mag. 16(6):22), so a margin of 24 px changes the result by
// less than 1e-8 of the grey levels.
func runCropped(ctx context.Context, ref, def *imageio.Gray, pts [][2]float64, ks []int, guesses [][12]float64, co correlate.Options) ([]correlate.Point, error) {
	m := co.Subset / 2
	if m == 0 {
		m = correlate.DefaultSubset / 2
	}
	s := co.Search
	if s == 0 {
		s = correlate.DefaultSearch
	}
	pad := float64(m + 24 + int(math.Ceil(4*co.Prefilter)))
	x0, y0, x1, y1 := math.Inf(1), math.Inf(1), math.Inf(-1), math.Inf(-1)
	grow := func(x, y, r float64) {
		x0, y0 = math.Min(x0, x-r), math.Min(y0, y-r)
		x1, y1 = math.Max(x1, x+r), math.Max(y1, y+r)
	}
	for a, k := range ks {
		x, y := pts[k][0], pts[k][1]
		grow(x, y, pad+float64(s))
		if guesses != nil {
			// A second-order guess can reach beyond its displacement at
			// the subset's corners: take its largest corner offset.
			g := guesses[a]
			r := 0.0
			for _, c := range [4][2]float64{{-1, -1}, {1, -1}, {-1, 1}, {1, 1}} {
				u, v := correlate.Displacement(&g, c[0]*float64(m), c[1]*float64(m))
				r = math.Max(r, math.Max(math.Abs(u-g[correlate.U]), math.Abs(v-g[correlate.V])))
			}
			grow(x+g[correlate.U], y+g[correlate.V], pad+r)
		}
	}
	cx0, cy0 := max(0, int(math.Floor(x0))), max(0, int(math.Floor(y0)))
	cx1, cy1 := min(ref.W, int(math.Ceil(x1))+1), min(ref.H, int(math.Ceil(y1))+1)
	if cx0 >= cx1 || cy0 >= cy1 || math.IsNaN(x0) || math.IsNaN(x1) {
		cx0, cy0, cx1, cy1 = 0, 0, ref.W, ref.H
	}
	w, h := cx1-cx0, cy1-cy0
	o := co
	if co.Mask != nil {
		g := imageio.NewGray(w, h)
		any := false
		for y := range h {
			for x := range w {
				if co.Mask.Inside(cx0+x, cy0+y) {
					g.Set(x, y, 1)
					any = true
				}
			}
		}
		out := make([]correlate.Point, len(ks))
		if !any {
			for a, k := range ks {
				out[a].X, out[a].Y, out[a].Status = pts[k][0], pts[k][1], correlate.Outside
			}
			return out, nil
		}
		mk, err := roi.FromImage(g, w, h)
		if err != nil {
			return nil, err
		}
		o.Mask = mk
	}
	p := make([][2]float64, len(ks))
	for a, k := range ks {
		p[a] = [2]float64{pts[k][0] - float64(cx0), pts[k][1] - float64(cy0)}
	}
	r, err := correlate.RunPoints(ctx, ref.Sub(cx0, cy0, w, h), def.Sub(cx0, cy0, w, h), p, guesses, o)
	if err != nil {
		return nil, err
	}
	for a := range r.Points {
		r.Points[a].X += float64(cx0)
		r.Points[a].Y += float64(cy0)
	}
	return r.Points, nil
}

// matchAll correlates ref → def at the points idx of pts (laid on grid g):
// first the seed points (every SeedSpacing px in both directions) from
// seed (nil: the integer search of correlate), then every other point from
// the shape function of the nearest accepted seed, then up to five rounds
// in which failed points start from an accepted 4-neighbour. Points not in
// idx are returned with status Outside.
func matchAll(ctx context.Context, ref, def *imageio.Gray, pts [][2]float64, idx []int, g correlate.Grid,
	seed func(k int) ([12]float64, bool), co correlate.Options, spacing int) ([]correlate.Point, error) {
	out := make([]correlate.Point, len(pts))
	for k := range out {
		out[k].X, out[k].Y, out[k].Status = pts[k][0], pts[k][1], correlate.Outside
	}
	if len(idx) == 0 {
		return out, nil
	}
	every := max(1, int(math.Round(float64(spacing)/float64(g.Step))))
	in := make([]bool, len(pts))
	for _, k := range idx {
		in[k] = true
	}
	// Seeds.
	var sk []int
	var sg [][12]float64
	for _, k := range idx {
		i, j := k%g.Nx, k/g.Nx
		if i%every != every/2 || j%every != every/2 {
			continue
		}
		if seed == nil {
			sk = append(sk, k)
			continue
		}
		if p, ok := seed(k); ok {
			sk = append(sk, k)
			sg = append(sg, p)
		}
	}
	if err := ctx.Err(); err != nil {
		return nil, fmt.Errorf("stereo: %w", err)
	}
	run := func(ks []int, guesses [][12]float64) error {
		if len(ks) == 0 {
			return nil
		}
		r, err := runCropped(ctx, ref, def, pts, ks, guesses, co)
		if err != nil {
			return fmt.Errorf("stereo: %w", err)
		}
		for a, k := range ks {
			out[k] = r[a]
		}
		return nil
	}
	if seed == nil {
		// Tracking: the integer search of correlate (Search px around each
		// point) is the costly part, so only every third seed in each
		// direction searches; the other seeds start from the nearest of
		// those and search only if that start fails.
		var wide, near []int
		for _, k := range sk {
			i, j := k%g.Nx/every, k/g.Nx/every
			if i%3 == 1 || j%3 == 1 || len(sk) < 9 {
				near = append(near, k)
			} else {
				wide = append(wide, k)
			}
		}
		if len(wide) == 0 {
			wide, near = sk, nil
		}
		if err := run(wide, nil); err != nil {
			return nil, err
		}
		var guided, blind []int
		var ng [][12]float64
		for _, k := range near {
			best, bd := -1, math.Inf(1)
			for _, s := range wide {
				if out[s].Status != correlate.OK {
					continue
				}
				if d := sq(pts[s][0]-pts[k][0]) + sq(pts[s][1]-pts[k][1]); d < bd {
					best, bd = s, d
				}
			}
			if best < 0 {
				blind = append(blind, k)
				continue
			}
			guided = append(guided, k)
			ng = append(ng, correlate.Recentre(out[best].P, pts[k][0]-pts[best][0], pts[k][1]-pts[best][1]))
		}
		if err := run(guided, ng); err != nil {
			return nil, err
		}
		if err := run(blind, nil); err != nil {
			return nil, err
		}
	} else if err := run(sk, sg); err != nil {
		return nil, err
	}
	var okSeeds []int
	isSeed := make([]bool, len(pts))
	for _, k := range sk {
		isSeed[k] = true
		if out[k].Status == correlate.OK {
			okSeeds = append(okSeeds, k)
		}
	}
	if len(okSeeds) == 0 {
		for _, k := range idx {
			if !isSeed[k] {
				out[k].Status = correlate.Unreached
			}
		}
		return out, nil
	}
	// Every other point from the nearest accepted seed.
	var rest []int
	var rg [][12]float64
	for _, k := range idx {
		if isSeed[k] {
			continue
		}
		best, bd := -1, math.Inf(1)
		for _, s := range okSeeds {
			d := sq(pts[s][0]-pts[k][0]) + sq(pts[s][1]-pts[k][1])
			if d < bd {
				best, bd = s, d
			}
		}
		rest = append(rest, k)
		rg = append(rg, correlate.Recentre(out[best].P, pts[k][0]-pts[best][0], pts[k][1]-pts[best][1]))
	}
	if err := run(rest, rg); err != nil {
		return nil, err
	}
	// Repair rounds from accepted neighbours.
	for range 5 {
		var ks []int
		var gs [][12]float64
		for _, k := range idx {
			st := out[k].Status
			if st == correlate.OK || st == correlate.Outside || st == correlate.LowContrast {
				continue
			}
			i, j := k%g.Nx, k/g.Nx
			for _, d := range [4][2]int{{1, 0}, {-1, 0}, {0, 1}, {0, -1}} {
				a, b := i+d[0], j+d[1]
				if a < 0 || b < 0 || a >= g.Nx || b >= g.Ny {
					continue
				}
				nb := b*g.Nx + a
				if in[nb] && out[nb].Status == correlate.OK {
					ks = append(ks, k)
					gs = append(gs, correlate.Recentre(out[nb].P, pts[k][0]-pts[nb][0], pts[k][1]-pts[nb][1]))
					break
				}
			}
		}
		if len(ks) == 0 {
			break
		}
		before := make([]correlate.Point, len(ks))
		for a, k := range ks {
			before[a] = out[k]
		}
		if err := run(ks, gs); err != nil {
			return nil, err
		}
		gained := 0
		for a, k := range ks {
			if out[k].Status == correlate.OK {
				gained++
			} else {
				out[k] = before[a]
			}
		}
		if gained == 0 {
			break
		}
	}
	return out, nil
}

package verify

import (
	"context"
	"fmt"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
)

// MottleTracker returns a Tracker that runs Mottle's correlation engine
// (correlate.Run: integer search at an automatic seed, IC-GN, reliability-
// guided propagation) with opt, overriding opt.Subset, opt.Step and
// opt.Mask so that the engine's grid is exactly the requested points. The
// points must form a regular lattice (x0 + i·s, y0 + j·s), as every point
// set of this package does; a point the engine rejects is returned with
// OK false.
func MottleTracker(opt correlate.Options) Tracker {
	return func(ctx context.Context, ref, def *imageio.Gray, pts [][2]int, subset int) ([]Disp, error) {
		if len(pts) == 0 {
			return nil, nil
		}
		x0, y0, x1, y1, step, err := lattice(pts)
		if err != nil {
			return nil, err
		}
		h := subset / 2
		rect := [4]int{x0 - h, y0 - h, x1 + h + 1, y1 + h + 1}
		mask, err := roi.Spec{Rect: &rect}.Mask(ref.W, ref.H)
		if err != nil {
			return nil, fmt.Errorf("mottle: subsets of the points do not fit the image: %w", err)
		}
		o := opt
		o.Subset, o.Step, o.Mask = subset, step, mask
		res, err := correlate.Run(ctx, ref, def, o)
		if err != nil {
			return nil, fmt.Errorf("mottle: %w", err)
		}
		g := res.Grid
		if g.X0 != x0 || g.Y0 != y0 || g.Step != step {
			return nil, fmt.Errorf("mottle: engine grid starts at (%d, %d) step %d, want (%d, %d) step %d", g.X0, g.Y0, g.Step, x0, y0, step)
		}
		out := make([]Disp, len(pts))
		for i, p := range pts {
			k := g.Index((p[0]-x0)/step, (p[1]-y0)/step)
			q := res.Points[k]
			if q.Status == correlate.OK {
				out[i] = Disp{U: q.P[correlate.U], V: q.P[correlate.V], OK: true}
			}
		}
		return out, nil
	}
}

// lattice returns the bounding box and spacing of a regular lattice of
// points, or an error if the points are not on one.
func lattice(pts [][2]int) (x0, y0, x1, y1, step int, err error) {
	x0, y0, x1, y1 = pts[0][0], pts[0][1], pts[0][0], pts[0][1]
	for _, p := range pts {
		x0, y0 = min(x0, p[0]), min(y0, p[1])
		x1, y1 = max(x1, p[0]), max(y1, p[1])
	}
	for _, p := range pts {
		step = gcd(gcd(step, p[0]-x0), p[1]-y0)
	}
	if step == 0 {
		step = 1
	}
	// The lattice must be full: every node of the box is one of the points.
	nx, ny := (x1-x0)/step+1, (y1-y0)/step+1
	seen := make(map[[2]int]bool, len(pts))
	for _, p := range pts {
		seen[p] = true
	}
	if len(seen) != nx*ny {
		return 0, 0, 0, 0, 0, fmt.Errorf("mottle tracker: %d distinct points do not fill a %d×%d lattice with step %d", len(seen), nx, ny, step)
	}
	return x0, y0, x1, y1, step, nil
}

func gcd(a, b int) int {
	if a < 0 {
		a = -a
	}
	if b < 0 {
		b = -b
	}
	for b != 0 {
		a, b = b, a%b
	}
	return a
}

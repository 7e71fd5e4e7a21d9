package correlate

import (
	"context"
	"errors"
	"fmt"
	"math"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
	"github.com/mottledic/mottle/pkg/roi"
)

// RunPoints correlates subsets centred at arbitrary reference positions
// pts (x, y), which need not be integers nor on a grid, each independently:
// IC-GN starts from guesses[i] when guesses is not nil (it must then have
// len(pts) entries), and falls back to an integer search within
// opt.Search around the point. Options Step, Seeds and Start are ignored.
// The Result has a zero Grid and Points in the order of pts; noise, predicted
// std and Stats are as for Run. Results do not depend on opt.Threads.
func RunPoints(ctx context.Context, ref, def *imageio.Gray, pts [][2]float64, guesses [][12]float64, opt Options) (*Result, error) {
	if guesses != nil && len(guesses) != len(pts) {
		return nil, fmt.Errorf("correlate: %d guesses for %d points: give one per point or none", len(guesses), len(pts))
	}
	var errs []error
	for i, p := range pts {
		if math.IsNaN(p[0]) || math.IsNaN(p[1]) || math.IsInf(p[0], 0) || math.IsInf(p[1], 0) {
			errs = append(errs, fmt.Errorf("correlate: point %d is %v: want finite coordinates", i, p))
		}
	}
	for i, g := range guesses {
		for _, v := range g {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				errs = append(errs, fmt.Errorf("correlate: guess %d has a non-finite parameter", i))
				break
			}
		}
	}
	if err := errors.Join(errs...); err != nil {
		return nil, err
	}
	r, err := newRun(ctx, ref, def, opt, tuning{})
	if err != nil {
		return nil, err
	}
	defer r.stop()
	r.alloc(len(pts))
	m := float64(r.m)
	var todo []int
	for i, p := range pts {
		r.pts[i].X, r.pts[i].Y = p[0], p[1]
		x0, y0 := int(math.Floor(p[0]-m)), int(math.Floor(p[1]-m))
		x1, y1 := int(math.Ceil(p[0]+m)), int(math.Ceil(p[1]+m))
		if r.rectInside(x0, y0, x1, y1) {
			todo = append(todo, i)
		} else {
			r.pts[i].Status = Outside
		}
	}
	if err := r.tabulate(ctx, len(todo)); err != nil {
		return nil, err
	}
	const chunk = 16 * batchSize
	for c := 0; c < len(todo); c += chunk {
		if err := ctx.Err(); err != nil {
			return nil, fmt.Errorf("correlate: %w", err)
		}
		if r.opt.Progress != nil {
			r.opt.Progress(c, len(todo))
		}
		items := r.nextBatch()
		for _, k := range todo[c:min(c+chunk, len(todo))] {
			it := item{idx: int32(k), x: pts[k][0], y: pts[k][1], search: true}
			if guesses != nil {
				it.hasStart, it.start = true, guesses[k]
			}
			items = append(items, it)
		}
		r.runBatch(items)
	}
	if r.opt.Progress != nil {
		r.opt.Progress(len(todo), len(todo))
	}
	res := &Result{Points: r.pts, Options: r.opt}
	r.finish(res)
	return res, nil
}

// EstimateNoise returns the image noise σ in grey levels from a static
// pair: two images of the unloaded, unmoved specimen. With independent
// noise of equal σ in each, Var(a − b) = 2σ², so σ = std(a − b)/√2 over the
// mask (nil = whole image); the mean difference (a brightness change) is
// removed first (common practice; iDICs 2018 guide, noise floor from
// stationary images). Any motion between the images inflates the estimate.
// The computation is quality.NoiseFromPair's.
func EstimateNoise(a, b *imageio.Gray, mask *roi.Mask) (float64, error) {
	if err := checkImages(a, b, 1); err != nil {
		return 0, err
	}
	s, err := quality.NoiseFromPair(a, b, mask)
	if err != nil {
		return 0, fmt.Errorf("correlate: %w", err)
	}
	return s, nil
}

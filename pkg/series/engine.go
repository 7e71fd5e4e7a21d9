package series

import (
	"context"
	"errors"
	"fmt"
	"math"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/imageio"
)

// New starts a series on the reference image ref, whose own time stamp and
// load (usually zero) are in meta, with parameters p (zero fields take the
// defaults of Defaults). It validates p against the image and returns every
// problem at once. It is NewWith with no Options.
func New(ref *imageio.Gray, meta FrameMeta, p Params) (*Tracker, error) {
	return NewWith(ref, meta, p, Options{})
}

// Options are the inputs of a series that are not parameters: they do not
// travel as JSON. The zero value is valid.
type Options struct {
	// Mask, if not nil, is an ROI mask image of the reference's size:
	// pixels brighter than half its maximum are inside (roi.FromImage). It
	// is intersected with Params.Analysis.ROI. The mask is saved with the
	// State, so Restore does not need it again.
	Mask *imageio.Gray
}

// NewWith is New with options: an ROI mask image.
func NewWith(ref *imageio.Gray, meta FrameMeta, p Params, opt Options) (*Tracker, error) {
	if ref == nil || ref.W < 1 || ref.H < 1 {
		return nil, errors.New("series: reference image is empty")
	}
	if err := p.Validate(ref.W, ref.H); err != nil {
		return nil, fmt.Errorf("series parameters: %w", err)
	}
	var pm *packedMask
	if opt.Mask != nil {
		var err error
		if pm, err = packMask(opt.Mask, ref.W, ref.H); err != nil {
			return nil, fmt.Errorf("series: %w", err)
		}
	}
	c, err := newCorrelator(ref, p.withDefaults(), pm)
	if err != nil {
		return nil, err
	}
	t, err := newTracker(ref, meta, p, c)
	if err != nil {
		return nil, err
	}
	t.st.Mask = pm
	return t, nil
}

// engine is the production correlator on pkg/correlate.
type engine struct {
	ref *imageio.Gray
	opt correlate.Options // direct correlation, with the ROI mask
	inc correlate.Options // incremental correlation: whole image
	lat lattice
	cg  correlate.Grid
}

// newCorrelator builds the production correlator. The grid of material
// points is the one pkg/correlate lays out for the reference and the ROI;
// it is taken from a correlation of the reference with itself, capped at
// two iterations per point (zero motion converges at once), which also
// checks that the reference can be correlated at all.
func newCorrelator(ref *imageio.Gray, p Params, mask *packedMask) (correlator, error) {
	return newCorrelatorOn(ref, p, mask, nil)
}

// newCorrelatorOn is newCorrelator on a grid already known (from a saved
// state or a frame's solution), or laid out by the reference's correlation
// with itself when lat is nil. With a known grid the reference is not
// correlated: every direct correlation checks that it lays out the same
// grid.
func newCorrelatorOn(ref *imageio.Gray, p Params, mask *packedMask, lat *lattice) (correlator, error) {
	var mi *imageio.Gray
	if mask != nil {
		var err error
		if mi, err = mask.image(ref.W, ref.H); err != nil {
			return nil, fmt.Errorf("series: %w", err)
		}
	}
	opt, err := analysis.CorrelationOptions(p.Analysis, ref.W, ref.H, mi)
	if err != nil {
		return nil, fmt.Errorf("series: %w", err)
	}
	inc := opt
	inc.Mask, inc.Seeds = nil, nil
	if lat != nil {
		g := correlate.Grid{X0: int(lat.X0), Y0: int(lat.Y0), Step: int(lat.Step), Nx: lat.Nx, Ny: lat.Ny}
		m := opt.Subset / 2
		if g.Nx < 1 || g.Ny < 1 || g.X0 < m || g.Y0 < m || g.X0+(g.Nx-1)*g.Step+m >= ref.W || g.Y0+(g.Ny-1)*g.Step+m >= ref.H ||
			float64(g.X0) != lat.X0 || float64(g.Y0) != lat.Y0 || float64(g.Step) != lat.Step {
			return nil, fmt.Errorf("series: the saved grid %+v does not fit the %d×%d px reference with subset %d; is it the same reference image?", *lat, ref.W, ref.H, opt.Subset)
		}
		return &engine{ref: ref, opt: opt, inc: inc, cg: g, lat: *lat}, nil
	}
	self := opt
	self.MaxIter, self.Progress, self.Start = 2, nil, nil
	res, err := correlate.Run(context.Background(), ref, ref, self)
	if err != nil {
		return nil, fmt.Errorf("series: reference image: %w", err)
	}
	g := res.Grid
	return &engine{ref: ref, opt: opt, inc: inc, cg: g,
		lat: lattice{X0: float64(g.X0), Y0: float64(g.Y0), Step: float64(g.Step), Nx: g.Nx, Ny: g.Ny}}, nil
}

func (e *engine) grid() lattice { return e.lat }

func fromPoint(pt correlate.Point) match {
	return match{U: pt.P[correlate.U], V: pt.P[correlate.V],
		Ux: pt.P[correlate.Ux], Uy: pt.P[correlate.Uy], Vx: pt.P[correlate.Vx], Vy: pt.P[correlate.Vy],
		ZNCC: pt.ZNCC, StdU: pt.StdU, StdV: pt.StdV, OK: pt.Status == correlate.OK, Reason: pt.Status.String()}
}

func (e *engine) direct(ctx context.Context, def *imageio.Gray, start []guess, progress func(done, total int)) ([]match, error) {
	opt := e.opt
	opt.Progress = progress
	if start != nil {
		opt.Start = make([]correlate.Point, len(start))
		for k, s := range start {
			if !s.OK {
				opt.Start[k].Status = correlate.Unreached
				continue
			}
			var P [12]float64
			P[correlate.U], P[correlate.V] = s.U, s.V
			P[correlate.Ux], P[correlate.Uy], P[correlate.Vx], P[correlate.Vy] = s.Ux, s.Uy, s.Vx, s.Vy
			opt.Start[k] = correlate.Point{P: P, Status: correlate.OK}
		}
	}
	res, err := correlate.Run(ctx, e.ref, def, opt)
	if err != nil {
		return nil, err
	}
	if res.Grid != e.cg {
		return nil, fmt.Errorf("series: correlation grid %+v differs from the series grid %+v", res.Grid, e.cg)
	}
	out := make([]match, len(res.Points))
	for k, pt := range res.Points {
		out[k] = fromPoint(pt)
	}
	return out, nil
}

// at correlates src with dst at the whole-pixel positions nearest to pts
// (the subsets then use the sampled image and its gradients, with no
// interpolation of the reference subset) and carries each solution to the
// exact point with correlate.Recentre: the mapping is evaluated at the
// material point's current position, not at the rounded one.
func (e *engine) at(ctx context.Context, src, dst *imageio.Gray, pts [][2]float64, start []guess, progress func(done, total int)) ([]match, error) {
	g := make([][12]float64, len(pts))
	centres := make([][2]float64, len(pts))
	for k, p := range pts {
		centres[k] = [2]float64{math.Round(p[0]), math.Round(p[1])}
		s := start[k]
		g[k][correlate.U], g[k][correlate.V] = s.U, s.V
		g[k][correlate.Ux], g[k][correlate.Uy], g[k][correlate.Vx], g[k][correlate.Vy] = s.Ux, s.Uy, s.Vx, s.Vy
	}
	opt := e.inc
	opt.Progress = progress
	res, err := correlate.RunPoints(ctx, src, dst, centres, g, opt)
	if err != nil {
		return nil, err
	}
	out := make([]match, len(res.Points))
	for k, pt := range res.Points {
		pt.P = correlate.Recentre(pt.P, pts[k][0]-centres[k][0], pts[k][1]-centres[k][1])
		out[k] = fromPoint(pt)
	}
	return out, nil
}

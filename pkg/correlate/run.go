package correlate

import (
	"context"
	"errors"
	"fmt"
	"runtime"
	"time"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
	"github.com/mottledic/mottle/pkg/spline"
)

// run is the state of one correlation.
type run struct {
	opt     Options
	tun     tuning
	threads int
	m       int
	ref     *imageio.Gray
	def     *imageio.Gray
	refSp   *spline.Image
	defSp   *spline.Image
	gx, gy  []float32
	mask    *roi.Mask
	grid    Grid
	pts     []Point
	state   []uint8
	hUU     []float64
	hVV     []float64
	s2      []float64 // per-point residual noise variance estimate
	seedLog []Seed
	minStd  float64 // subsets with a smaller grey-level std are LowContrast
	comp    []int32 // connected component of each computable point, −1 outside
	compN   []int   // size of each component
	solvers []*solver
	tmpl    [][]float64 // per-solver template scratch
	items   []item      // the batch being computed
	pool    pool
}

// Run correlates def against ref on a regular grid over the region of
// interest and returns every grid point with its status. It fails on
// invalid options or images (nil, different sizes, non-finite values, too
// small for the subset), a mask of the wrong size, seeds off the grid or
// when ctx is cancelled; points that cannot be measured are not errors but
// are flagged in the Result.
func Run(ctx context.Context, ref, def *imageio.Gray, opt Options) (*Result, error) {
	return runWith(ctx, ref, def, opt, tuning{})
}

// tuning selects alternative inner paths for tests and benchmarks that
// compare them with the default in the same run; the zero value is what Run
// uses.
type tuning struct {
	direct   bool       // interpolate from the B-spline coefficients even when a table would be used
	portable bool       // use the portable table pass even in builds with a vector one
	trace    *poolTrace // record phase and batch timings (benchmarks)
}

// runWith is Run with the given tuning.
func runWith(ctx context.Context, ref, def *imageio.Gray, opt Options, tun tuning) (*Result, error) {
	tr := tun.trace
	if tr != nil {
		tr.t0 = time.Now()
	}
	r, err := newRun(ctx, ref, def, opt, tun)
	if err != nil {
		return nil, err
	}
	defer r.stop()
	tr.mark("newRun")
	if err := r.setupGrid(); err != nil {
		return nil, err
	}
	tr.mark("setupGrid")
	if err := r.tabulate(ctx, r.grid.Len()); err != nil {
		return nil, err
	}
	tr.mark("tabulate")
	seeds, err := r.seedIndices()
	if err != nil {
		return nil, err
	}
	if err := r.propagateAll(ctx, seeds); err != nil {
		return nil, err
	}
	tr.mark("propagate")
	if tr != nil {
		tr.sleeps, tr.waits, tr.spun = r.pool.sleeps.Load(), r.pool.waits, time.Duration(r.pool.spun.Load())
	}
	res := &Result{Grid: r.grid, Points: r.pts, Options: r.opt}
	res.Seeds = r.seedLog
	r.finish(res)
	tr.mark("finish")
	return res, nil
}

func checkImages(ref, def *imageio.Gray, subset int) error {
	var errs []error
	for _, c := range []struct {
		name string
		g    *imageio.Gray
	}{{"reference", ref}, {"deformed", def}} {
		if c.g == nil {
			errs = append(errs, fmt.Errorf("correlate: %s image is nil", c.name))
			continue
		}
		if c.g.W < subset || c.g.H < subset {
			errs = append(errs, fmt.Errorf("correlate: %s image is %d×%d: want at least the subset size %d in each direction", c.name, c.g.W, c.g.H, subset))
		}
		if c.g.Stride < c.g.W || len(c.g.Pix) < (c.g.H-1)*c.g.Stride+c.g.W {
			errs = append(errs, fmt.Errorf("correlate: %s image %d×%d with stride %d has only %d samples", c.name, c.g.W, c.g.H, c.g.Stride, len(c.g.Pix)))
		}
	}
	if len(errs) == 0 && (ref.W != def.W || ref.H != def.H) {
		errs = append(errs, fmt.Errorf("correlate: reference image is %d×%d but deformed image is %d×%d: they must have the same size", ref.W, ref.H, def.W, def.H))
	}
	return errors.Join(errs...)
}

// newRun validates the inputs, prefilters the images, builds the splines
// and gradients and starts the workers.
func newRun(ctx context.Context, ref, def *imageio.Gray, opt Options, tun tuning) (*run, error) {
	opt.fill()
	if err := opt.Validate(); err != nil {
		return nil, err
	}
	if err := checkImages(ref, def, opt.Subset); err != nil {
		return nil, err
	}
	if opt.Mask != nil && (opt.Mask.W != ref.W || opt.Mask.H != ref.H) {
		return nil, fmt.Errorf("correlate: ROI mask is %d×%d but the images are %d×%d", opt.Mask.W, opt.Mask.H, ref.W, ref.H)
	}
	r := &run{opt: opt, tun: tun, m: opt.Subset / 2, threads: opt.Threads, mask: opt.Mask}
	if r.threads == 0 {
		r.threads = runtime.GOMAXPROCS(0)
	}
	if r.mask == nil {
		r.mask = roi.Full(ref.W, ref.H)
	}
	r.ref, r.def = ref, def
	if opt.Prefilter > 0 {
		var err error
		if r.ref, err = spline.Smooth(ref, opt.Prefilter); err != nil {
			return nil, fmt.Errorf("correlate: reference image: %w", err)
		}
		if r.def, err = spline.Smooth(def, opt.Prefilter); err != nil {
			return nil, fmt.Errorf("correlate: deformed image: %w", err)
		}
	}
	tr := tun.trace
	tr.mark("check")
	var err error
	if r.refSp, err = spline.NewContext(ctx, r.ref, opt.Interp, r.threads); err != nil {
		return nil, fmt.Errorf("correlate: reference image: %w", err)
	}
	tr.mark("refSpline")
	if r.defSp, err = spline.NewContext(ctx, r.def, opt.Interp, r.threads); err != nil {
		return nil, fmt.Errorf("correlate: deformed image: %w", err)
	}
	tr.mark("defSpline")
	if r.gx, r.gy, err = r.refSp.SampleGradients(ctx, r.threads); err != nil {
		return nil, err
	}
	tr.mark("gradients")

	minStd := 0.01 * maskStd(r.ref, r.mask, r.threads)
	r.minStd = minStd
	r.solvers = make([]*solver, r.threads)
	r.tmpl = make([][]float64, r.threads)
	for i := range r.solvers {
		r.solvers[i] = newSolver(r.ref, r.gx, r.gy, r.refSp, r.defSp, &r.opt, minStd)
		r.solvers[i].portable = tun.portable
		r.tmpl[i] = make([]float64, r.solvers[i].n)
	}
	r.pool.init()
	if r.threads > 1 {
		for w := 1; w < r.threads; w++ {
			go r.worker(w)
		}
	}
	return r, nil
}

// tabulate replaces the cubic spline of the deformed image by its
// coefficient table (spline.Table) in every solver when npts subsets are
// to be computed: the table costs about as much to build as two or three
// interpolations of every image pixel and then halves the cost of each, so
// it is built only when the subsets cover the image about twice or more.
// Quintic splines are never tabulated.
func (r *run) tabulate(ctx context.Context, npts int) error {
	if r.opt.Interp != spline.Cubic || r.tun.direct || npts*r.solvers[0].n < 2*r.def.W*r.def.H {
		return nil
	}
	tab, err := spline.NewTable(ctx, r.defSp, r.threads)
	if err != nil {
		return fmt.Errorf("correlate: deformed image: %w", err)
	}
	for _, s := range r.solvers {
		s.useTable(tab)
	}
	r.defSp = nil
	return nil
}

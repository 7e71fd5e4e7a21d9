package correlate

import (
	"context"
	"errors"
	"fmt"
	"runtime"
	"slices"
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
	mask    *roi.Mask // nil: the whole image (no mask is built for it)
	grid    Grid
	pts     []Point
	state   []uint8
	hUU     []float64
	hVV     []float64
	s2      []float64 // per-point residual noise variance estimate
	seedLog []Seed
	minStd  float64 // subsets with a smaller grey-level std are LowContrast
	refInt  bool    // ref holds integer grey levels of at most 2¹⁶ (slider)
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
// tableKind chooses the deformed-image table.
type tableKind int8

const (
	tableDefault tableKind = iota // the build's choice, rowsDefault
	tableCells                    // the bicubic table (spline.Table)
	tableRows                     // the row table (spline.RowTable)
)

// rows reports whether the run tabulates the deformed image as a row table.
func (t tuning) rows() bool {
	return t.table == tableRows || t.table == tableDefault && rowsDefault
}

type tuning struct {
	direct   bool          // interpolate from the B-spline coefficients even when a table would be used
	portable bool          // use the portable table pass even in builds with a vector one
	noFetch  bool          // no prefetch of a point's subsets (prefetch.go)
	spin     int           // checks for work, yielding to goroutines, before a worker yields its core (pool.go); 0: poolSpin
	yield    time.Duration // how long a worker then yields its core before it sleeps; 0: poolYield, < 0: not at all
	allGrads bool          // sample the reference gradients on every image row, not only the grid's (gradRows)
	table    tableKind     // which table to build where one pays
	trace    *poolTrace    // record phase and batch timings (benchmarks)
}

// runWith is Run with the given tuning.
func runWith(ctx context.Context, ref, def *imageio.Gray, opt Options, tun tuning) (*Result, error) {
	tr := tun.trace
	if tr != nil {
		tr.t0 = time.Now()
	}
	r, err := start(ctx, ref, def, opt, tun, true)
	if err != nil {
		return nil, err
	}
	defer r.stop()
	if err := r.gridMoments(ctx); err != nil {
		return nil, err
	}
	tr.mark("gridMoments")
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
		tr.slept, tr.waited = time.Duration(r.pool.slept.Load()), time.Duration(r.pool.waited)
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

// newRun validates the inputs, prefilters the images, starts the workers
// and builds the splines, the gradients and the solvers.
func newRun(ctx context.Context, ref, def *imageio.Gray, opt Options, tun tuning) (*run, error) {
	return start(ctx, ref, def, opt, tun, false)
}

// start is newRun; with grid set it also lays out the grid, marks its
// points (setupGrid) and tabulates the deformed image when that pays
// (tabulate), in the same steps.
//
// The set-up runs in four steps (six with a prefilter), each a set of
// independent parts shared out on the worker pool, so that no more than
// Threads goroutines ever compute and a part of one chain (the reference
// image's spline and gradients, the deformed image's spline and table, the
// grid) fills the time another leaves idle: (0) with a prefilter, both
// images are smoothed along x and then along y; (1) the coefficient arrays are allocated
// while the grey-level sums of the mask are taken; (2) both images are
// checked and filtered along x; (3) both are filtered along y while the
// table and the gradient arrays are allocated (the runtime zeroes them)
// and the grid points are marked; (4) the gradients and the table are
// computed while the points are split into connected components. Each
// part computes the same numbers whichever goroutine runs it and in
// whatever order, so results do not depend on Threads.
func start(ctx context.Context, ref, def *imageio.Gray, opt Options, tun tuning, grid bool) (*run, error) {
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
	r.ref, r.def = ref, def
	tab := false
	if grid {
		if err := r.layout(); err != nil {
			return nil, err
		}
		tab = r.tabulates(r.grid.Len())
	}
	tr := tun.trace
	tr.mark("check")
	r.pool.init()
	for w := 1; w < r.threads; w++ {
		go r.worker(w)
	}
	ok := false
	defer func() {
		if !ok {
			r.stop()
		}
	}()
	cancelled := func() error {
		if err := ctx.Err(); err != nil {
			return fmt.Errorf("correlate: %w", err)
		}
		return nil
	}
	const rows, blocks, gridRows = spline.RowChunk, spline.BlockChunk, 4
	parts := func(n, chunk int) int { return (n + chunk - 1) / chunk }
	h, w := r.ref.H, r.ref.W
	nRows := parts(h, rows)

	// (0) The Gaussian prefilter, along x and then along y, both images
	// at once.
	if opt.Prefilter > 0 {
		refS, err := spline.NewSmoothing(ref, opt.Prefilter)
		if err != nil {
			return nil, fmt.Errorf("correlate: reference image: %w", err)
		}
		defS, err := spline.NewSmoothing(def, opt.Prefilter)
		if err != nil {
			return nil, fmt.Errorf("correlate: deformed image: %w", err)
		}
		both := func(step func(sm *spline.Smoothing, y0, y1 int)) func(int) {
			return func(k int) {
				if ctx.Err() != nil {
					return
				}
				sm := refS
				if k >= nRows {
					sm, k = defS, k-nRows
				}
				step(sm, k*rows, min((k+1)*rows, h))
			}
		}
		r.shareOut(2*nRows, both((*spline.Smoothing).Rows))
		if err := cancelled(); err != nil {
			return nil, err
		}
		if err := refS.Err(); err != nil {
			return nil, fmt.Errorf("correlate: reference image: %w", err)
		}
		if err := defS.Err(); err != nil {
			return nil, fmt.Errorf("correlate: deformed image: %w", err)
		}
		r.shareOut(2*nRows, both((*spline.Smoothing).Columns))
		if err := cancelled(); err != nil {
			return nil, err
		}
		r.ref, r.def = refS.Result(), defS.Result()
		tr.mark("prefilter")
	}

	// (1) The coefficient arrays and the sums for the contrast threshold.
	var refB, defB *spline.Build
	var refErr, defErr error
	sums := make([][3]float64, h)
	ints := make([]bool, h)
	nSums := parts(h, rows)
	r.shareOut(2+nSums, func(k int) {
		switch {
		case k == 0:
			refB, refErr = spline.NewBuild(r.ref, opt.Interp)
		case k == 1:
			defB, defErr = spline.NewBuild(r.def, opt.Interp)
		default:
			k -= 2
			maskSums(r.ref, r.mask, sums, ints, k*rows, min((k+1)*rows, h))
		}
	})
	if refErr != nil {
		return nil, fmt.Errorf("correlate: reference image: %w", refErr)
	}
	if defErr != nil {
		return nil, fmt.Errorf("correlate: deformed image: %w", defErr)
	}
	r.minStd = 0.01 * stdOfSums(sums)
	r.refInt = !slices.Contains(ints, false)
	tr.mark("alloc")

	// (2) Both images checked and filtered along x.
	r.shareOut(2*nRows, func(k int) {
		if ctx.Err() != nil {
			return
		}
		b := refB
		if k >= nRows {
			b, k = defB, k-nRows
		}
		b.FilterRows(k*rows, min((k+1)*rows, h))
	})
	if err := cancelled(); err != nil {
		return nil, err
	}
	if err := refB.Err(); err != nil {
		return nil, fmt.Errorf("correlate: reference image: %w", err)
	}
	if err := defB.Err(); err != nil {
		return nil, fmt.Errorf("correlate: deformed image: %w", err)
	}
	tr.mark("rows")

	// (3) Both filtered along y; the table and gradients allocated; the
	// grid marked.
	var table defTable
	nBlocks := parts(refB.Blocks(), blocks)
	nMark := 0
	if grid {
		nMark = parts(r.grid.Ny, gridRows)
	}
	r.shareOut(2+2*nBlocks+nMark, func(k int) {
		if ctx.Err() != nil {
			return
		}
		switch {
		case k == 0:
			if tab {
				table = r.allocTable(w, h)
			}
		case k == 1:
			r.gx, r.gy = make([]float32, w*h), make([]float32, w*h)
		case k < 2+2*nBlocks:
			k -= 2
			b := refB
			if k >= nBlocks {
				b, k = defB, k-nBlocks
			}
			b.FilterColumns(k*blocks, min((k+1)*blocks, b.Blocks()))
		default:
			k -= 2 + 2*nBlocks
			r.markRows(k*gridRows, min((k+1)*gridRows, r.grid.Ny))
		}
	})
	if err := cancelled(); err != nil {
		return nil, err
	}
	r.refSp, r.defSp = refB.Finish(), defB.Finish()
	tr.mark("columns")

	// (4) The gradients and the table; the grid's components.
	nTable := 0
	if tab {
		nTable = nRows
	}
	g0, g1 := r.gradRows(grid)
	k0 := g0 / rows
	nGrad := parts(g1, rows) - k0
	r.shareOut(1+nGrad+nTable, func(k int) {
		if ctx.Err() != nil {
			return
		}
		switch {
		case k == 0:
			if grid {
				r.label()
			}
		case k <= nGrad:
			k += k0 - 1
			r.refSp.GradientRows(r.gx, r.gy, max(k*rows, g0), min((k+1)*rows, g1))
		default:
			k -= 1 + nGrad
			table.FillRows(r.defSp, k*rows, min((k+1)*rows, h))
		}
	})
	if err := cancelled(); err != nil {
		return nil, err
	}
	tr.mark("tables")

	r.solvers = make([]*solver, r.threads)
	r.tmpl = make([][]float64, r.threads)
	for i := range r.solvers {
		r.solvers[i] = newSolver(r.ref, r.gx, r.gy, r.refSp, r.defSp, &r.opt, r.minStd)
		r.solvers[i].portable = tun.portable
		r.tmpl[i] = make([]float64, r.solvers[i].n)
	}
	if table != nil {
		for _, s := range r.solvers {
			s.useDefTable(table)
		}
		r.defSp = nil
	}
	ok = true
	return r, nil
}

// gradRows returns the image rows g0 ≤ y < g1 whose reference gradients
// the run reads. With a grid (grid set) every point computed is a grid
// point whose whole subset lies in the image, so only the rows the grid's
// subsets span are read: prepare, the moment tables and the prefetch read
// the gradients of a point's own subset rows and nothing else (the seed
// fallback warps the reference through the spline, not the gradients).
// Without one (points anywhere, points.go) it is every row. Rows outside
// keep zero gradients, which nothing reads.
func (r *run) gradRows(grid bool) (g0, g1 int) {
	h := r.ref.H
	if !grid || r.tun.allGrads {
		return 0, h
	}
	g := r.grid
	return max(0, g.Y0-r.m), min(h, g.Y0+(g.Ny-1)*g.Step+r.m+1)
}

// tabulates reports whether tabulate builds the table for npts subsets.
func (r *run) tabulates(npts int) bool {
	side := 2*r.m + 1
	return (r.opt.Interp == spline.Cubic || r.opt.Interp == spline.Quintic) && !r.tun.direct && npts*side*side >= 2*r.def.W*r.def.H
}

// tabulate replaces the spline of the deformed image by its table
// (allocTable) in every solver when npts subsets are to be computed: the
// table costs about as much to build as two or three interpolations of
// every image pixel and then halves the cost of each (cubic) or cuts it to
// a third (quintic), so it is built only when the subsets cover the image
// about twice or more.
func (r *run) tabulate(ctx context.Context, npts int) error {
	if !r.tabulates(npts) {
		return nil
	}
	h := r.def.H
	table := r.allocTable(r.def.W, h)
	const rows = spline.RowChunk
	r.shareOut((h+rows-1)/rows, func(k int) {
		if ctx.Err() == nil {
			table.FillRows(r.defSp, k*rows, min((k+1)*rows, h))
		}
	})
	if err := ctx.Err(); err != nil {
		return fmt.Errorf("correlate: deformed image: %w", err)
	}
	for _, s := range r.solvers {
		s.useDefTable(table)
	}
	r.defSp = nil
	return nil
}

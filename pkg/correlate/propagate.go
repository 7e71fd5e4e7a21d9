package correlate

import (
	"context"
	"errors"
	"fmt"
	"math"
	"runtime"
	"sort"
	"sync"
	"sync/atomic"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
	"github.com/mottledic/mottle/pkg/spline"
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
// batchSize. A batch is formed from the state left by the previous batches
// only, each of its points starts from its best already-converged
// neighbours (in order of ZNCC, then index), and the points of a batch are
// independent of each other, so any schedule computes the same numbers.
// The batch size is a constant, never derived from the thread count.
const batchSize = 64

// Point states during a run.
const (
	stOutside = iota // subset not wholly inside the ROI: never computed
	stPending        // computable, not yet computed
	stQueued         // in the current batch
	stDone           // computed, Status OK: may start its neighbours
	stFailed         // computed, rejected
)

// Result is the outcome of Run.
type Result struct {
	// Grid is the lattice of subset centres.
	Grid Grid
	// Points holds one Point per grid point, row-major (Grid.Index);
	// rejected points keep their Status and reason.
	Points []Point
	// Noise is the image noise σ in grey levels used for StdU and StdV.
	Noise float64
	// NoiseSource says where Noise came from: "given" (Options.Noise),
	// "residual" (median over the accepted points of the ZNSSD residual)
	// or "none" (no accepted point).
	NoiseSource string
	// Seeds lists the seed attempts in the order they were made.
	Seeds []Seed
	// Stats summarises the points.
	Stats Stats
	// Options are the options used, with defaults filled in (Mask, Start
	// and Progress as given).
	Options Options
}

// Seed describes one seed attempt.
type Seed struct {
	Index      int     // grid index of the seed point
	X, Y       int     // its reference position
	Auto       bool    // chosen automatically (not from Options.Seeds)
	DU, DV     int     // integer displacement found by the search
	SearchZNCC float64 // ZNCC of the integer match
	OK         bool    // the seed converged above the ZNCC threshold
}

// Stats summarises a Result.
type Stats struct {
	Total       int     // grid points
	OK          int     // accepted points
	Outside     int     // subset not wholly inside the ROI
	LowContrast int     // too little texture
	Diverged    int     // IC-GN failed to converge
	LowZNCC     int     // converged below the threshold
	Unreached   int     // not connected to a seed
	LeftImage   int     // warped subset left the deformed image
	MeanIter    float64 // mean IC-GN iterations of the accepted points
	MeanZNCC    float64 // mean ZNCC of the accepted points
	MedianStdU  float64 // median predicted std of u over the accepted points, px
	MedianStdV  float64 // median predicted std of v, px
}

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
	// worker pool
	items []item
	next  atomic.Int64
	start []chan struct{}
	done  chan struct{}
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
	direct   bool // interpolate from the B-spline coefficients even when a table would be used
	portable bool // use the portable table pass even in builds with a vector one
}

// runWith is Run with the given tuning.
func runWith(ctx context.Context, ref, def *imageio.Gray, opt Options, tun tuning) (*Result, error) {
	r, err := newRun(ctx, ref, def, opt, tun)
	if err != nil {
		return nil, err
	}
	defer r.stop()
	if err := r.setupGrid(); err != nil {
		return nil, err
	}
	if err := r.tabulate(ctx, r.grid.Len()); err != nil {
		return nil, err
	}
	seeds, err := r.seedIndices()
	if err != nil {
		return nil, err
	}
	if err := r.propagateAll(ctx, seeds); err != nil {
		return nil, err
	}
	res := &Result{Grid: r.grid, Points: r.pts, Options: r.opt}
	res.Seeds = r.seedLog
	r.finish(res)
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
	var err error
	if r.refSp, err = spline.NewContext(ctx, r.ref, opt.Interp, r.threads); err != nil {
		return nil, fmt.Errorf("correlate: reference image: %w", err)
	}
	if r.defSp, err = spline.NewContext(ctx, r.def, opt.Interp, r.threads); err != nil {
		return nil, fmt.Errorf("correlate: deformed image: %w", err)
	}
	if r.gx, r.gy, err = r.refSp.SampleGradients(ctx, r.threads); err != nil {
		return nil, err
	}

	minStd := 0.01 * maskStd(r.ref, r.mask, r.threads)
	r.minStd = minStd
	r.solvers = make([]*solver, r.threads)
	r.tmpl = make([][]float64, r.threads)
	for i := range r.solvers {
		r.solvers[i] = newSolver(r.ref, r.gx, r.gy, r.refSp, r.defSp, &r.opt, minStd)
		r.solvers[i].portable = tun.portable
		r.tmpl[i] = make([]float64, r.solvers[i].n)
	}
	if r.threads > 1 {
		r.done = make(chan struct{})
		r.start = make([]chan struct{}, r.threads)
		for w := range r.start {
			r.start[w] = make(chan struct{})
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

// maskStd is the grey-level standard deviation of g inside the mask,
// computed with up to threads goroutines: sums per row, then over the rows
// in order, so the value does not depend on threads.
func maskStd(g *imageio.Gray, m *roi.Mask, threads int) float64 {
	rows := make([][3]float64, g.H)
	parallelFor(g.H, threads, func(y0, y1 int) {
		for y := y0; y < y1; y++ {
			var n, s, ss float64
			for x, v := range g.Pix[y*g.Stride : y*g.Stride+g.W] {
				if m.Inside(x, y) {
					f := float64(v)
					n++
					s += f
					ss += f * f
				}
			}
			rows[y] = [3]float64{n, s, ss}
		}
	})
	var n, s, ss float64
	for _, r := range rows {
		n += r[0]
		s += r[1]
		ss += r[2]
	}
	if n < 2 {
		return 0
	}
	mean := s / n
	return math.Sqrt(math.Max(ss/n-mean*mean, 0))
}

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

func (r *run) stop() {
	for _, c := range r.start {
		close(c)
	}
}

func (r *run) worker(w int) {
	s := r.solvers[w]
	for range r.start[w] {
		for {
			k := int(r.next.Add(1) - 1)
			if k >= len(r.items) {
				break
			}
			r.compute(s, w, &r.items[k])
		}
		r.done <- struct{}{}
	}
}

// runBatch computes r.items on all workers and waits for them.
func (r *run) runBatch() {
	if r.threads <= 1 {
		for k := range r.items {
			r.compute(r.solvers[0], 0, &r.items[k])
		}
		return
	}
	r.next.Store(0)
	for _, c := range r.start {
		c <- struct{}{}
	}
	for range r.start {
		<-r.done
	}
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

// setupGrid lays the grid over the mask's bounding box and marks the
// points whose subset is wholly inside the mask.
func (r *run) setupGrid() error {
	m, step := r.m, r.opt.Step
	bx0, by0, bx1, by1 := r.mask.Bounds()
	// Keep subsets the interpolation edge margin inside the image, so that
	// a point near the border is not rejected for any small motion.
	e := int(edgeMargin(r.opt.Interp))
	bx0, by0 = max(bx0, e), max(by0, e)
	bx1, by1 = min(bx1, r.ref.W-e), min(by1, r.ref.H-e)
	g := Grid{X0: bx0 + m, Y0: by0 + m, Step: step}
	if bx1-1-m < g.X0 || by1-1-m < g.Y0 {
		return fmt.Errorf("correlate: the region of interest (%d×%d px bounding box) is smaller than the %d px subset", bx1-bx0, by1-by0, r.opt.Subset)
	}
	g.Nx = (bx1-1-m-g.X0)/step + 1
	g.Ny = (by1-1-m-g.Y0)/step + 1
	r.grid = g
	n := g.Len()
	if r.opt.Start != nil && len(r.opt.Start) != n {
		return fmt.Errorf("correlate: Start has %d points but the grid has %d (%d×%d): it must come from a run with the same images size, subset, step and ROI", len(r.opt.Start), n, g.Nx, g.Ny)
	}
	r.alloc(n)
	// Each grid point depends on its own subset only: rows of the grid are
	// shared out among the threads.
	parallelFor(g.Ny, r.threads, func(j0, j1 int) {
		for j := j0; j < j1; j++ {
			for i := 0; i < g.Nx; i++ {
				x, y := g.At(i, j)
				k := g.Index(i, j)
				r.pts[k].X, r.pts[k].Y = float64(x), float64(y)
				switch {
				case !r.mask.RectInside(x-m, y-m, x+m, y+m):
					r.pts[k].Status = Outside
				case subsetStd(r.ref, x, y, m) < r.minStd:
					// Low contrast is a property of the reference subset
					// alone: flag it now, so that blank areas are reported
					// as such rather than as unreached.
					r.pts[k].Status = LowContrast
					r.state[k] = stFailed
				default:
					r.state[k] = stPending
				}
			}
		}
	})
	r.label()
	return nil
}

// label splits the computable points into 4-connected components.
func (r *run) label() {
	r.comp = make([]int32, len(r.pts))
	for k := range r.comp {
		r.comp[k] = -1
	}
	var stack []int32
	var nb [4]int32
	for k := range r.pts {
		if r.state[k] != stPending || r.comp[k] >= 0 {
			continue
		}
		c := int32(len(r.compN))
		size := 0
		r.comp[k] = c
		stack = append(stack[:0], int32(k))
		for len(stack) > 0 {
			x := stack[len(stack)-1]
			stack = stack[:len(stack)-1]
			size++
			for _, y := range nb[:r.neighbours(int(x), &nb)] {
				if r.state[y] == stPending && r.comp[y] < 0 {
					r.comp[y] = c
					stack = append(stack, y)
				}
			}
		}
		r.compN = append(r.compN, size)
	}
}

// untouchedComponent returns the largest component (lowest label on ties)
// of at least 10 points with no computed point and not yet tried, or −1.
func (r *run) untouchedComponent(tried map[int]bool) int {
	touched := make([]bool, len(r.compN))
	for k, c := range r.comp {
		if c >= 0 && r.state[k] != stPending {
			touched[c] = true
		}
	}
	best := -1
	for c, n := range r.compN {
		if !touched[c] && !tried[c] && n >= 10 && (best < 0 || n > r.compN[best]) {
			best = c
		}
	}
	return best
}

func (r *run) alloc(n int) {
	r.pts = make([]Point, n)
	r.state = make([]uint8, n)
	r.hUU = make([]float64, n)
	r.hVV = make([]float64, n)
	r.s2 = make([]float64, n)
}

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

// queue is a max-heap of candidate points keyed by the best ZNCC of their
// converged neighbours; ties go to the lower index. Stale entries (a point
// already computed, or a lower key than its current one) are skipped on pop.
type queue struct {
	key []float64
	idx []int32
}

func (q *queue) less(a, b int) bool {
	if q.key[a] != q.key[b] {
		return q.key[a] > q.key[b]
	}
	return q.idx[a] < q.idx[b]
}

func (q *queue) swap(a, b int) {
	q.key[a], q.key[b] = q.key[b], q.key[a]
	q.idx[a], q.idx[b] = q.idx[b], q.idx[a]
}

func (q *queue) push(key float64, idx int32) {
	q.key = append(q.key, key)
	q.idx = append(q.idx, idx)
	for i := len(q.key) - 1; i > 0; {
		p := (i - 1) / 2
		if !q.less(i, p) {
			break
		}
		q.swap(i, p)
		i = p
	}
}

func (q *queue) pop() (float64, int32) {
	k, x := q.key[0], q.idx[0]
	last := len(q.key) - 1
	q.swap(0, last)
	q.key, q.idx = q.key[:last], q.idx[:last]
	for i := 0; ; {
		l, rr, b := 2*i+1, 2*i+2, i
		if l < last && q.less(l, b) {
			b = l
		}
		if rr < last && q.less(rr, b) {
			b = rr
		}
		if b == i {
			break
		}
		q.swap(i, b)
		i = b
	}
	return k, x
}

func (q *queue) len() int { return len(q.key) }

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
	r.items = make([]item, 0, batchSize)

	// Start guesses: independent points, in chunks for progress reports.
	if r.opt.Start != nil {
		var idx []int
		for k := range r.pts {
			if r.state[k] == stPending && r.opt.Start[k].Status == OK {
				idx = append(idx, k)
			}
		}
		chunk := 16 * batchSize
		r.items = make([]item, 0, chunk)
		for c := 0; c < len(idx); c += chunk {
			if err := ctx.Err(); err != nil {
				return fmt.Errorf("correlate: %w", err)
			}
			r.items = r.items[:0]
			for _, k := range idx[c:min(c+chunk, len(idx))] {
				r.items = append(r.items, item{idx: int32(k), hasStart: true, start: r.opt.Start[k].P, x: r.pts[k].X, y: r.pts[k].Y})
			}
			r.runBatch()
			for _, it := range r.items {
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

	tried := map[int]bool{}
	for {
		for q.len() > 0 {
			if err := ctx.Err(); err != nil {
				return fmt.Errorf("correlate: %w", err)
			}
			r.items = r.items[:0]
			for q.len() > 0 && len(r.items) < batchSize {
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
				// Best neighbour first: ZNCC descending, then index.
				for a := 1; a < int(it.nnb); a++ {
					for b := a; b > 0 && r.before(it.nb[b], it.nb[b-1]); b-- {
						it.nb[b], it.nb[b-1] = it.nb[b-1], it.nb[b]
					}
				}
				r.items = append(r.items, it)
			}
			r.runBatch()
			for _, it := range r.items {
				r.accept(int(it.idx), &q, key)
			}
			done += len(r.items)
			progress()
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

// finish estimates the noise, fills in the predicted standard deviations
// and the statistics.
func (r *run) finish(res *Result) {
	var s2 []float64
	for k := range r.pts {
		if r.pts[k].Status == OK {
			s2 = append(s2, r.s2[k])
		}
	}
	switch {
	case r.opt.Noise > 0:
		res.Noise, res.NoiseSource = r.opt.Noise, "given"
	case len(s2) > 0:
		// With a Gaussian prefilter the residual holds smoothed noise, of
		// standard deviation σ·Σg² for white noise σ and 1-D kernel g;
		// report σ of the images as recorded.
		var g2 float64
		for _, g := range spline.GaussianKernel(r.opt.Prefilter) {
			g2 += g * g
		}
		res.Noise, res.NoiseSource = math.Sqrt(median(s2))/g2, "residual"
	default:
		res.NoiseSource = "none"
	}
	st := &res.Stats
	st.Total = len(r.pts)
	var su, sv []float64
	for k := range r.pts {
		p := &r.pts[k]
		switch p.Status {
		case OK:
			st.OK++
			p.StdU = res.Noise * math.Sqrt(2*r.hUU[k])
			p.StdV = res.Noise * math.Sqrt(2*r.hVV[k])
			st.MeanIter += float64(p.Iter)
			st.MeanZNCC += p.ZNCC
			su = append(su, p.StdU)
			sv = append(sv, p.StdV)
		case Outside:
			st.Outside++
		case LowContrast:
			st.LowContrast++
		case Diverged:
			st.Diverged++
		case LowZNCC:
			st.LowZNCC++
		case Unreached:
			st.Unreached++
		case LeftImage:
			st.LeftImage++
		}
	}
	if st.OK > 0 {
		st.MeanIter /= float64(st.OK)
		st.MeanZNCC /= float64(st.OK)
		st.MedianStdU = median(su)
		st.MedianStdV = median(sv)
	}
}

// median returns the median of v, reordering v.
func median(v []float64) float64 {
	if len(v) == 0 {
		return 0
	}
	sort.Float64s(v)
	h := len(v) / 2
	if len(v)%2 == 1 {
		return v[h]
	}
	return (v[h-1] + v[h]) / 2
}

// subsetStd returns the grey-level standard deviation of the subset of
// half-width m centred at pixel (x, y), which must lie inside g.
func subsetStd(g *imageio.Gray, x, y, m int) float64 {
	var s, ss float64
	for j := y - m; j <= y+m; j++ {
		for _, v := range g.Pix[j*g.Stride+x-m : j*g.Stride+x+m+1] {
			f := float64(v)
			s += f
			ss += f * f
		}
	}
	n := float64((2*m + 1) * (2*m + 1))
	mean := s / n
	return math.Sqrt(math.Max(ss/n-mean*mean, 0))
}

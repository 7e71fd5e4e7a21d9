package correlate

import (
	"math"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/spline"
)

// solver holds the images and the per-point reference-subset data. One
// solver belongs to one goroutine; it does not allocate after newSolver.
type solver struct {
	ref      *imageio.Gray // reference samples
	gx, gy   []float32     // reference gradients at pixel centres
	refSp    *spline.Image // reference spline, for centres off the pixel grid (may be nil)
	def      *spline.Image // deformed-image spline (nil when tab is set)
	tab      *spline.Table // deformed-image coefficient table, or nil
	portable bool          // use the portable table pass even where a vector one exists
	mom      *momentTable  // reference moments of the grid's subsets (moments.go), or nil
	// scratch of the vector passes (tablepass_simd.go, tablepass_simd_rows.go)
	rowX, rowY   []int64        // fixed-point start of each subset row
	rowDX, rowDY []int64        // fixed-point first differences at each row's start (second order)
	etas2h8      []float64      // η²/2 of each row, eight times
	vout8        [9][8]float64  // lane sums of pass1v
	vout2        [15][8]float64 // lane sums of pass2v
	fmean8       [8]float64     // f̄, eight times
	half8        [8]float64     // ½, eight times
	offs         [4]int64       // cell offsets of a group of four pixels (sampleRow)
	rv           [4][8]int64    // fixed-point positions of a subset row's groups, x then y (sampleRow)
	scale4       [4]float64     // 2⁻⁴⁰, four times
	scale8       [8]float64     // 2⁻⁴⁰, eight times
	rowSpread    [16]uint32     // sampleRows: lane (p, i) ← 4 + p
	rowPick      [4][16]uint32  // sampleRows: lane p ← (p, i), for each i
	rowK         [3][16]float32 // sampleRows: 3, 4 and −2, sixteen times each
	lim          [3]int64       // usable area in fixed point: lo, x and y limits (row2v)
	// scratch of the vector prepare (prepare_simd.go)
	etas8      []float64 // η of each row, eight times
	lastBits8  uint8     // lanes of a row's last group of eight not in the group before
	tailBits8  uint8     // the same for the last group of eight of the whole subset
	pout       [31][8]float64
	cc8        [3][8]float64    // m+1, 2(m+1)+1, (m+1)(m+2), eight times
	rising8    [5][5][8]float64 // fromRising, eight times
	h2w        [3][5][5][8]float64
	h2b        [4][3][3][8]float64
	lo         float64       // smallest allowed warped coordinate (edge margin)
	defW       float64       // largest allowed warped x: W−1 − margin
	defH       float64       // largest allowed warped y: H−1 − margin
	shape      Shape         // First or Second
	np         int           // number of parameters, 6 or 12
	m          int           // subset half-width
	n          int           // pixels per subset, (2m+1)²
	maxIt      int           // iteration cap
	tol        float64       // convergence threshold, px
	tailFrac   float64       // share of tol for tailBelow: 1/8 first order, 1/16 second
	minStd     float64       // subsets with a smaller grey-level std are LowContrast
	f          []float64     // f − f̄
	fx, fy     []float64     // reference gradients over the subset
	gbuf       []float64     // interpolated deformed values, one row
	xs, ys     []float64     // warped positions, one row (second order)
	xis        []float64     // ξ = −m … m
	fromRising [5][5]float64 // ξ^a = Σ_k fromRising[a][k]·C(i+k, k), ξ = i − m
	xc, yc     float64       // subset centre
	fmean      float64       // f̄
	df         float64       // ‖f − f̄‖
	chol       [12 * 12]float64
	b0, sj     [12]float64 // Σ J f̃ and Σ J
	hUU        float64     // (H⁻¹)[U][U], for the predicted std
	hVV        float64
	sssig      float64   // min(Σfx², Σfy²), sum of squared subset intensity gradients
	kern       []float64 // Gaussian prefilter kernel, nil when off
	wpad       []float64 // scratch for smoothedVar
	wtmp       []float64

	rtab *spline.RowTable        // deformed-image row table, or nil (then tab may be set)
	qtab *spline.QuinticRowTable // deformed-image quintic row table, or nil
}

func newSolver(ref *imageio.Gray, gx, gy []float32, refSp, def *spline.Image, opt *Options, minStd float64) *solver {
	m := opt.Subset / 2
	side := 2*m + 1
	// Near the edges the mirror extension of the spline is a guess, and
	// its error decays like |z₁|^d with the distance d from the edge
	// (z₁ = √3 − 2 for the cubic spline): keep warped subsets a few
	// pixels inside.
	edge := edgeMargin(opt.Interp)
	s := &solver{
		ref: ref, gx: gx, gy: gy, refSp: refSp, def: def,
		lo: edge, defW: float64(def.W-1) - edge, defH: float64(def.H-1) - edge,
		shape: opt.Shape, np: 6, m: m, n: side * side,
		maxIt: opt.MaxIter, tol: opt.Tol, minStd: minStd,
		gbuf: make([]float64, side), xs: make([]float64, side), ys: make([]float64, side),
	}
	s.tailFrac = 1.0 / 8
	if s.shape == Second {
		s.np = 12
		s.tailFrac = 1.0 / 16
	}
	s.xis = make([]float64, side)
	for i := range s.xis {
		s.xis[i] = float64(i - m)
	}
	s.fromRising = risingToPowers(m)
	if vectorPass {
		s.initVector()
	}
	if opt.Prefilter > 0 {
		s.kern = spline.GaussianKernel(opt.Prefilter)
		r := len(s.kern) / 2
		ext, wide := side+2*r, side+4*r
		s.wpad = make([]float64, 2*side*wide)
		s.wtmp = make([]float64, 2*wide*ext)
	}
	s.f = make([]float64, s.n)
	s.fx = make([]float64, s.n)
	s.fy = make([]float64, s.n)
	return s
}

// risingToPowers returns the matrix a with (i − m)^p = Σ_k a[p][k]·C(i+k, k)
// for every integer i and p ≤ 4. C(i+k, k), a polynomial of degree k in i,
// vanishes at i = −1 … −k, so at the points i = −1 … −5 the system is
// lower triangular and is solved by forward substitution; every entry is
// an integer, exact in float64 for the subset sizes allowed.
func risingToPowers(m int) [5][5]float64 {
	binom := func(n, k int) float64 { // C(n, k) as a polynomial in n
		v := 1.0
		for t := 0; t < k; t++ {
			v *= float64(n-t) / float64(t+1)
		}
		return v
	}
	var a [5][5]float64
	for p := 0; p < 5; p++ {
		for j := 0; j < 5; j++ { // at i = −(j+1), C(i+k, k) = 0 for k > j
			i := -(j + 1)
			rhs := math.Pow(float64(i-m), float64(p))
			for k := 0; k < j; k++ {
				rhs -= a[p][k] * binom(i+k, k)
			}
			a[p][j] = math.Round(rhs / binom(i+j, j))
		}
	}
	return a
}

// useTable makes the solver interpolate the deformed image from tab, the
// table of the spline it was built with.
func (s *solver) useTable(tab *spline.Table) {
	s.tab, s.def = tab, nil
}

// useRowTable makes the solver interpolate the deformed image from rt, the
// row table of the spline it was built with.
func (s *solver) useRowTable(rt *spline.RowTable) {
	s.rtab, s.def = rt, nil
}

// useQuinticRowTable makes the solver interpolate the deformed image from
// qt, the quintic row table of the spline it was built with.
func (s *solver) useQuinticRowTable(qt *spline.QuinticRowTable) {
	s.qtab, s.def = qt, nil
}

// tabled reports whether the solver interpolates from a table.
func (s *solver) tabled() bool { return s.tab != nil || s.rowTabled() }

// edgeMargin is the distance in pixels that warped subsets keep from the
// image edges for the given spline order.
func edgeMargin(o spline.Order) float64 {
	if o == spline.Quintic {
		return 3
	}
	return 2
}

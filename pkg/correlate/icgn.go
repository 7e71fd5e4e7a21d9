package correlate

import (
	"math"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/spline"
)

// The inverse compositional Gauss–Newton (IC-GN) subset solver: Baker &
// Matthews 2004, "Lucas-Kanade 20 years on: a unifying framework", IJCV
// 56(3):221, with the ZNSSD criterion as in Pan, Li & Tong 2013, "Fast,
// robust and accurate digital image correlation calculation without
// redundant computations", Exp. Mech. 53:1277.
//
// With f̃ = f − f̄ over the reference subset, g̃ = g − ḡ over the warped
// deformed subset, Δf = ‖f̃‖, Δg = ‖g̃‖ and J the steepest-descent images
// ∇f·∂W/∂p, each iteration solves
//
//	Δp = −H⁻¹ Σ Jᵀ (f̃ − (Δf/Δg)·g̃),   H = Σ JᵀJ,
//
// and composes W(p) ← W(p) ∘ W(Δp)⁻¹. H, ΣJ and ΣJf̃ depend on the reference
// only and are computed once per point. Because Σ J g̃ = Σ J g − ḡ Σ J, one
// pass over the subset per iteration suffices.

// solver holds the images and the per-point reference-subset data. One
// solver belongs to one goroutine; it does not allocate after newSolver.
type solver struct {
	ref      *imageio.Gray // reference samples
	gx, gy   []float32     // reference gradients at pixel centres
	refSp    *spline.Image // reference spline, for centres off the pixel grid (may be nil)
	def      *spline.Image // deformed-image spline (nil when tab is set)
	tab      *spline.Table // deformed-image coefficient table, or nil
	portable bool          // use the portable table pass even where a vector one exists
	// scratch of the vector pass (tablepass_simd.go)
	rowX, rowY []int64    // fixed-point start of each subset row
	etas       []float64  // η of each row, four times
	lastW      [4]float64 // weights of the last group of four pixels of a row
	vout       [9][4]float64
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
	if vectorPass {
		s.initVector()
	}
	s.xis = make([]float64, side)
	for i := range s.xis {
		s.xis[i] = float64(i - m)
	}
	s.fromRising = risingToPowers(m)
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

// edgeMargin is the distance in pixels that warped subsets keep from the
// image edges for the given spline order.
func edgeMargin(o spline.Order) float64 {
	if o == spline.Quintic {
		return 3
	}
	return 2
}

// jacobian writes the steepest-descent vector of one pixel at offset (ξ, η).
func (s *solver) jacobian(fx, fy, xi, eta float64, j *[12]float64) {
	j[U], j[Ux], j[Uy] = fx, fx*xi, fx*eta
	j[V], j[Vx], j[Vy] = fy, fy*xi, fy*eta
	if s.np == 12 {
		xx, xy, yy := xi*xi/2, xi*eta, eta*eta/2
		j[Uxx], j[Uxy], j[Uyy] = fx*xx, fx*xy, fx*yy
		j[Vxx], j[Vxy], j[Vyy] = fy*xx, fy*xy, fy*yy
	}
}

// prepare loads the reference subset centred at (xc, yc) and computes the
// Hessian and its Cholesky factor. It returns OK, Outside (the subset leaves
// the reference image) or LowContrast.
func (s *solver) prepare(xc, yc float64) Status {
	m := s.m
	s.xc, s.yc = xc, yc
	ix, iy := int(xc), int(yc)
	onGrid := float64(ix) == xc && float64(iy) == yc
	if xc-float64(m) < 0 || yc-float64(m) < 0 || xc+float64(m) > float64(s.ref.W-1) || yc+float64(m) > float64(s.ref.H-1) {
		return Outside
	}
	if !onGrid && s.refSp == nil {
		return Outside
	}
	if onGrid && s.np == 6 {
		return s.prepare1(ix, iy)
	}
	return s.prepareAny(onGrid)
}

// prepareAny is prepare for any centre (on the pixel grid or not, given
// by onGrid) and either warp, after the checks of prepare.
func (s *solver) prepareAny(onGrid bool) Status {
	m := s.m
	xc, yc := s.xc, s.yc
	ix, iy := int(xc), int(yc)
	var sum float64
	side := 2*m + 1
	k := 0
	for j := -m; j <= m; j++ {
		f, fx, fy := s.f[k:k+side], s.fx[k:k+side], s.fy[k:k+side]
		if onGrid {
			o := (iy+j)*s.ref.Stride + ix - m
			pix := s.ref.Pix[o : o+side]
			o = (iy+j)*s.ref.W + ix - m
			gx, gy := s.gx[o:o+side], s.gy[o:o+side]
			pix, gx, gy = pix[:len(f)], gx[:len(f)], gy[:len(f)]
			fx, fy = fx[:len(f)], fy[:len(f)]
			for i, v := range pix {
				f[i], fx[i], fy[i] = float64(v), float64(gx[i]), float64(gy[i])
				sum += f[i]
			}
		} else {
			for i := range f {
				f[i], fx[i], fy[i] = s.refSp.Grad(xc+float64(i-m), yc+float64(j))
				sum += f[i]
			}
		}
		k += side
	}
	s.fmean = sum / float64(s.n)
	var ss float64
	for k := range s.f {
		s.f[k] -= s.fmean
		ss += s.f[k] * s.f[k]
	}
	s.df = math.Sqrt(ss)
	if !(s.df > 0) || s.df/math.Sqrt(float64(s.n)) < s.minStd {
		return LowContrast
	}
	var h [12 * 12]float64
	s.b0, s.sj = [12]float64{}, [12]float64{}
	if s.np == 6 {
		s.hessian1(&h)
	} else {
		s.hessian2m(&h)
	}
	return s.factor(&h)
}

// factor factors the Hessian h (upper triangle) and sets the entries of its
// inverse used for the predicted std. It returns OK or LowContrast.
func (s *solver) factor(h *[144]float64) Status {
	np := s.np
	if !cholesky(h, np, &s.chol) {
		return LowContrast
	}
	var eu, ev [12]float64
	eu[U], ev[V] = 1, 1
	cholSolve(&s.chol, np, &eu)
	cholSolve(&s.chol, np, &ev)
	s.hUU, s.hVV = eu[U], ev[V]
	if s.kern != nil {
		s.hUU, s.hVV = s.smoothedVars(&eu, &ev)
	}
	return OK
}

// prepare1 is prepare for the first-order warp and a subset centred on the
// pixel (ix, iy), the case of every grid point: it reads the subset once
// for the samples, their sums and the Hessian's row sums (hessian1's
// running sums, here fused with the copy so that the chains of additions
// run side by side instead of one loop after another), and once more for
// Σ J f and Σ J, with f not yet centred: Σ J f̃ = Σ J f − f̄ Σ J.
func (s *solver) prepare1(ix, iy int) Status {
	m := s.m
	side := 2*m + 1
	cc := float64(m + 1)
	var sum float64
	var hxx, hxy, hyy [3][3]float64
	var bx, by, jx, jy [2][2]float64 // a+b ≤ 1
	k := 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		f, fx, fy := s.f[k:k+side], s.fx[k:k+side], s.fy[k:k+side]
		o := (iy+j)*s.ref.Stride + ix - m
		pix := s.ref.Pix[o : o+side]
		o = (iy+j)*s.ref.W + ix - m
		gxs, gys := s.gx[o:o+side], s.gy[o:o+side]
		pix, gxs, gys = pix[:len(f)], gxs[:len(f)], gys[:len(f)]
		fx, fy = fx[:len(f)], fy[:len(f)]
		// Running sums from the right end of the row, as in hessian1.
		var rs, xx0, xx1, xx2, xy0, xy1, xy2, yy0, yy1, yy2 float64
		for i := len(f) - 1; i >= 0; i-- {
			v, gx, gy := float64(pix[i]), float64(gxs[i]), float64(gys[i])
			f[i], fx[i], fy[i] = v, gx, gy
			rs += v
			xx0 += gx * gx
			xx1 += xx0
			xx2 += xx1
			xy0 += gx * gy
			xy1 += xy0
			xy2 += xy1
			yy0 += gy * gy
			yy1 += yy0
			yy2 += yy1
		}
		sum += rs
		var bx0, bx1, by0, by1, jx0, jx1, jy0, jy1 float64
		for i := len(f) - 1; i >= 0; i-- {
			gx, gy, v := fx[i], fy[i], f[i]
			bx0 += gx * v
			bx1 += bx0
			by0 += gy * v
			by1 += by0
			jx0 += gx
			jx1 += jx0
			jy0 += gy
			jy1 += jy0
		}
		addRow2(&hxx, cc, eta, xx0, xx1, xx2)
		addRow2(&hxy, cc, eta, xy0, xy1, xy2)
		addRow2(&hyy, cc, eta, yy0, yy1, yy2)
		addRow1(&bx, cc, eta, bx0, bx1)
		addRow1(&by, cc, eta, by0, by1)
		addRow1(&jx, cc, eta, jx0, jx1)
		addRow1(&jy, cc, eta, jy0, jy1)
		k += side
	}
	n := float64(s.n)
	s.fmean = sum / n
	fm := s.fmean
	// Centre the samples; two partial sums of squares, so that the
	// additions do not wait for each other.
	var ss0, ss1 float64
	f := s.f[:s.n]
	for k := 0; k+1 < len(f); k += 2 {
		a, b := f[k]-fm, f[k+1]-fm
		f[k], f[k+1] = a, b
		ss0 += a * a
		ss1 += b * b
	}
	if len(f)%2 == 1 {
		a := f[len(f)-1] - fm
		f[len(f)-1] = a
		ss0 += a * a
	}
	s.df = math.Sqrt(ss0 + ss1)
	if !(s.df > 0) || s.df/math.Sqrt(n) < s.minStd {
		return LowContrast
	}
	var h [144]float64
	s.setHessian1(&h, &hxx, &hxy, &hyy)
	for a, pw := range pow1 {
		bb, jj := &bx, &jx
		if a >= 3 {
			bb, jj = &by, &jy
		}
		sj := jj[pw[0]][pw[1]]
		s.sj[a] = sj
		s.b0[a] = bb[pw[0]][pw[1]] - fm*sj
	}
	for a := 6; a < 12; a++ {
		s.b0[a], s.sj[a] = 0, 0
	}
	return s.factor(&h)
}

// pow1 lists the powers of ξ and η in the first-order steepest-descent
// vector J = [fx, fx ξ, fx η, fy, fy ξ, fy η].
var pow1 = [6][2]int{{0, 0}, {1, 0}, {0, 1}, {0, 0}, {1, 0}, {0, 1}}

// setHessian1 fills the upper triangle of the first-order H from the
// moments Σ w ξ^a η^b of w = fx², fx fy, fy², and sets sssig.
func (s *solver) setHessian1(h *[144]float64, hxx, hxy, hyy *[3][3]float64) {
	// Entry (a, b) is Σ w ξ^(pa+pb) η^(qa+qb).
	for a := 0; a < 6; a++ {
		for b := a; b < 6; b++ {
			src := hxx
			switch {
			case a < 3 && b >= 3:
				src = hxy
			case a >= 3:
				src = hyy
			}
			h[a*12+b] = src[pow1[a][0]+pow1[b][0]][pow1[a][1]+pow1[b][1]]
		}
	}
	s.sssig = math.Min(hxx[0][0], hyy[0][0])
}

// smoothedVars returns Var(hᵀΔp)/(2σ²) for the two combinations cu and cv
// (the rows of H⁻¹ for u and v) when both images were smoothed by the
// separable kernel s.kern before correlation, σ being the noise of the
// unsmoothed images. The linearised IC-GN update is Δp = H⁻¹ Jᵀ G(n₁ − n₂)
// with G the smoothing, so the variance of the combination c = H⁻¹h-weighted
// steepest-descent image w = J·c is 2σ²‖Gw‖² (G symmetric). Without
// smoothing this reduces to hᵀH⁻¹h, the usual (H⁻¹)_uu.
//
// Gw is computed over the subset grown by the kernel radius r on every
// side: a horizontal pass over the subset's rows, then a vertical pass.
// The scratch planes carry r zero samples beyond each end, so no index is
// tested in the loops; each output sample is the sum over the kernel in
// order, as it would be with the out-of-range terms left out.
func (s *solver) smoothedVars(cu, cv *[12]float64) (vu, vv float64) {
	m := s.m
	side := 2*m + 1
	kern := s.kern
	r := len(kern) / 2
	ext := side + 2*r
	wide := ext + 2*r
	// wu, wv: side rows of width wide, w at column 2r + i (i = 0 … side−1).
	wu, wv := s.wpad[:side*wide], s.wpad[side*wide:2*side*wide]
	var jv [12]float64
	k := 0
	for j := 0; j < side; j++ {
		ru, rv := wu[j*wide+2*r:j*wide+2*r+side], wv[j*wide+2*r:j*wide+2*r+side]
		for i := range ru {
			s.jacobian(s.fx[k], s.fy[k], float64(i-m), float64(j-m), &jv)
			var a, b float64
			for q := 0; q < s.np; q++ {
				a += jv[q] * cu[q]
				b += jv[q] * cv[q]
			}
			ru[i], rv[i] = a, b
			k++
		}
	}
	// tu, tv: ext + 2r rows of width ext; the horizontal pass of subset
	// row j goes to row 2r + j, the others stay zero.
	tu, tv := s.wtmp[:wide*ext], s.wtmp[wide*ext:2*wide*ext]
	for j := 0; j < side; j++ {
		su, sv := wu[j*wide:(j+1)*wide], wv[j*wide:(j+1)*wide]
		du, dv := tu[(2*r+j)*ext:(2*r+j+1)*ext], tv[(2*r+j)*ext:(2*r+j+1)*ext]
		for x := range du {
			xu, xv := su[x:x+len(kern)], sv[x:x+len(kern)]
			var a, b float64
			for q, kq := range kern {
				a += kq * xu[q]
				b += kq * xv[q]
			}
			du[x], dv[x] = a, b
		}
	}
	for y := 0; y < ext; y++ {
		for x := 0; x < ext; x++ {
			var a, b float64
			for q, kq := range kern {
				a += kq * tu[(y+q)*ext+x]
				b += kq * tv[(y+q)*ext+x]
			}
			vu += a * a
			vv += b * b
		}
	}
	return vu, vv
}

// hessian1 accumulates the upper triangle of H = Σ JᵀJ, Σ J f̃ and Σ J for
// the first-order warp. Every entry is a sum of w·ξ^a·η^b with w one of
// fx², fx·fy, fy² (or fx f̃, fy f̃, fx, fy), so rows are summed over ξ first

// addRow2 adds one subset row at η = eta to dst[a][b] = Σ w ξ^a η^b
// (a+b ≤ 2), from the running sums of a weight w taken from the row's right
// end (s0 = Σ w, c1 = Σ (i+1) w, c2 = Σ (i+1)(i+2)/2 w, see hessian1) and
// cc = m + 1: with u = i + 1 = ξ + cc, Σ ξ w = c1 − cc s0 and
// Σ ξ² w = 2 c2 − (2cc+1) Σ ξ w − cc(cc+1) s0.
func addRow2(dst *[3][3]float64, cc, eta, s0, c1, c2 float64) {
	s1 := c1 - cc*s0
	s2 := 2*c2 - (2*cc+1)*s1 - cc*(cc+1)*s0
	dst[0][0] += s0
	dst[1][0] += s1
	dst[2][0] += s2
	dst[0][1] += s0 * eta
	dst[1][1] += s1 * eta
	dst[0][2] += s0 * (eta * eta)
}

// addRow1 is addRow2 up to a+b ≤ 1, from the running sums d0 = Σ w and
// d1 = Σ (i+1) w.
func addRow1(dst *[2][2]float64, cc, eta, d0, d1 float64) {
	dst[0][0] += d0
	dst[1][0] += d1 - cc*d0
	dst[0][1] += d0 * eta
}

// and weighted by η afterwards.
func (s *solver) hessian1(h *[144]float64) {
	m := s.m
	side := 2*m + 1
	// sums[q][a][b] = Σ w_q ξ^a η^b for q = xx, xy, yy, a+b ≤ 2.
	var hxx, hxy, hyy [3][3]float64
	var bx, by, jx, jy [2][2]float64 // a+b ≤ 1
	k := 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		f := s.f[k : k+side]
		fx := s.fx[k : k+side]
		fy := s.fy[k : k+side]
		fx, fy = fx[:len(f)], fy[:len(f)]
		// r[q][a] = Σ_row w_q ξ^a, by running sums from the right end of
		// the row: after pixel i, c0 = Σ_{i'≥i} w, c1 = Σ_{i'≥i} c0 and
		// c2 = Σ_{i'≥i} c1, so that at the left end c1 = Σ (i+1) w and
		// c2 = Σ (i+1)(i+2)/2 w, from which the moments in ξ = i − m
		// follow. Three additions per weight and pixel instead of two
		// multiplications and three additions. The sums are scalars, in
		// two loops of at most nine, so that they stay in registers (the
		// compiler keeps arrays in memory).
		var xx0, xx1, xx2, xy0, xy1, xy2, yy0, yy1, yy2 float64
		for i := len(f) - 1; i >= 0; i-- {
			gx, gy := fx[i], fy[i]
			xx0 += gx * gx
			xx1 += xx0
			xx2 += xx1
			xy0 += gx * gy
			xy1 += xy0
			xy2 += xy1
			yy0 += gy * gy
			yy1 += yy0
			yy2 += yy1
		}
		// The same for fx f̃, fy f̃, fx, fy, up to ξ¹.
		var bx0, bx1, by0, by1, jx0, jx1, jy0, jy1 float64
		for i := len(f) - 1; i >= 0; i-- {
			gx, gy, fv := fx[i], fy[i], f[i]
			bx0 += gx * fv
			bx1 += bx0
			by0 += gy * fv
			by1 += by0
			jx0 += gx
			jx1 += jx0
			jy0 += gy
			jy1 += jy0
		}
		// With u = i + 1 = ξ + c: Σ u w = S1 + c S0 and
		// Σ u(u+1)/2 w = (S2 + (2c+1) S1 + c(c+1) S0)/2.
		cc := float64(m + 1)
		addRow2(&hxx, cc, eta, xx0, xx1, xx2)
		addRow2(&hxy, cc, eta, xy0, xy1, xy2)
		addRow2(&hyy, cc, eta, yy0, yy1, yy2)
		addRow1(&bx, cc, eta, bx0, bx1)
		addRow1(&by, cc, eta, by0, by1)
		addRow1(&jx, cc, eta, jx0, jx1)
		addRow1(&jy, cc, eta, jy0, jy1)
		k += side
	}
	s.setHessian1(h, &hxx, &hxy, &hyy)
	for a, pw := range pow1 {
		bb, jj := &bx, &jx
		if a >= 3 {
			bb, jj = &by, &jy
		}
		s.b0[a] = bb[pw[0]][pw[1]]
		s.sj[a] = jj[pw[0]][pw[1]]
	}
}

// hessian2 is hessian1 for the second-order warp, by explicit outer products.
func (s *solver) hessian2(h *[144]float64) {
	m := s.m
	np := s.np
	var jv [12]float64
	var sxx, syy float64
	k := 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		for i := -m; i <= m; i++ {
			fx, fy := s.fx[k], s.fy[k]
			sxx += fx * fx
			syy += fy * fy
			s.jacobian(fx, fy, float64(i), eta, &jv)
			f := s.f[k]
			for a := 0; a < np; a++ {
				ja := jv[a]
				s.b0[a] += ja * f
				s.sj[a] += ja
				row := h[a*12 : a*12+np]
				for b := a; b < np; b++ {
					row[b] += ja * jv[b]
				}
			}
			k++
		}
	}
	s.sssig = math.Min(sxx, syy)
}

// result of one IC-GN attempt.
type attempt struct {
	p         [12]float64
	zncc      float64
	iter      int
	converged bool
	status    Status // OK, LeftImage or Diverged (ZNCC threshold applied by the caller)
}

// solve runs IC-GN from p0 on the prepared subset.
func (s *solver) solve(p0 [12]float64) attempt {
	p := p0
	if s.np == 6 {
		for k := Uxx; k <= Vyy; k++ {
			p[k] = 0
		}
	}
	n := float64(s.n)
	m := float64(s.m)
	var a attempt
	var dprev float64 // size of the previous step
	for it := 1; it <= s.maxIt; it++ {
		a.iter = it
		var sg, sgg, sfg float64
		var sjg [12]float64
		var ok bool
		switch {
		case s.tab != nil && s.np == 6:
			ok = s.pass1fast(&p, &sg, &sgg, &sfg, &sjg)
		case s.tab != nil:
			ok = s.pass2t(&p, &sg, &sgg, &sfg, &sjg)
		case s.np == 6:
			ok = s.pass1(&p, &sg, &sgg, &sfg, &sjg)
		default:
			ok = s.pass2(&p, &sg, &sgg, &sfg, &sjg)
		}
		if !ok {
			// The warped subset reaches past the usable area of the
			// deformed image: the point is outside, not a failed solve.
			a.p, a.status = p, LeftImage
			return a
		}
		gm := sg / n
		dg2 := sgg - n*gm*gm
		if !(dg2 > 0) {
			a.p, a.status = p, Diverged
			return a
		}
		dg := math.Sqrt(dg2)
		a.zncc = sfg / (s.df * dg)
		scale := s.df / dg
		var dp [12]float64
		for k := 0; k < s.np; k++ {
			dp[k] = -(s.b0[k] - scale*(sjg[k]-gm*s.sj[k]))
		}
		cholSolve(&s.chol, s.np, &dp)
		d := paramNorm(&dp, s.np, m)
		if !(d <= 2*m) { // NaN, or a step larger than the subset
			a.p, a.status = p, Diverged
			return a
		}
		var ok2 bool
		if s.np == 6 {
			ok2 = compose1(&p, &dp)
		} else {
			ok2 = compose2(&p, &dp)
		}
		if !ok2 {
			a.p, a.status = p, Diverged
			return a
		}
		if d < s.tol || it > 1 && tailBelow(dprev, d, s.tol*s.tailFrac) {
			a.p, a.converged, a.status = p, true, OK
			return a
		}
		dprev = d
		// (Rules tried and dropped: tailBelow with tol/8 for the
		// second-order warp, which left points up to 1.4e-4 px from the
		// limit on a 512² pair like BenchmarkRun1024's (tol/16: 8.5e-5),
		// and without a factor up to 3e-4 px in
		// TestStoppingRuleWithinTol; the largest displacement change on
		// the subset boundary as the step size, stricter than paramNorm,
		// which cost iterations: 2.70 instead of 2.54 per point on
		// BenchmarkRun1024; an exit after five iterations without
		// progress, which turned a few slowly converging points into
		// Diverged.)
	}
	a.p, a.status = p, Diverged
	return a
}

// tailBelow reports whether the steps shrink so fast that what is left of
// the iteration is far below tol: with the contraction ρ = d/dprev of the
// last two steps, a geometric tail would add ρ/(1−ρ)·d, and the rule asks
// for that to be below lim, tol/8 for the first-order warp and tol/16 for
// the second-order one (solver.tailFrac). It saves the last step of most
// points that the plain rule, d < tol, takes three steps for: their second
// step is a few 1e-4 px and the steps contract by 0.01–0.1 each. On a 512²
// pair like BenchmarkRun1024's the true tail (the later steps of the plain
// rule) of the points it stopped was up to 12× (first order) and 20×
// (second) the geometric estimate, and at most 5e-5 px and 8.5e-5 px;
// TestStoppingRuleWithinTol bounds the distance to the limit by tol.
func tailBelow(dprev, d, lim float64) bool {
	r := d / dprev
	return r < 0.5 && d*r < (1-r)*lim
}

// paramNorm is the step size in px: the Euclidean norm of the parameter
// update with gradients weighted by the half-width m and second
// derivatives by m²/2 (m² for the cross terms).
func paramNorm(dp *[12]float64, np int, m float64) float64 {
	norm := dp[U]*dp[U] + dp[V]*dp[V] + m*m*(dp[Ux]*dp[Ux]+dp[Uy]*dp[Uy]+dp[Vx]*dp[Vx]+dp[Vy]*dp[Vy])
	if np == 12 {
		h := m * m / 2
		norm += h*h*(dp[Uxx]*dp[Uxx]+dp[Uyy]*dp[Uyy]+dp[Vxx]*dp[Vxx]+dp[Vyy]*dp[Vyy]) +
			m*m*m*m*(dp[Uxy]*dp[Uxy]+dp[Vxy]*dp[Vxy])
	}
	return math.Sqrt(norm)
}

// pass1 interpolates the deformed subset under the first-order warp p and
// accumulates Σg, Σg², Σf̃g and ΣJg (g offset by f̄ to limit cancellation).
// It reports false if the warped subset leaves the deformed image.
func (s *solver) pass1(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	m := s.m
	fm := float64(m)
	a11, a12, a21, a22 := 1+p[Ux], p[Uy], p[Vx], 1+p[Vy]
	cx, cy := s.xc+p[U], s.yc+p[V]
	// The warp is affine: the corners bound the warped subset.
	for _, c := range [4][2]float64{{-fm, -fm}, {fm, -fm}, {-fm, fm}, {fm, fm}} {
		x := cx + a11*c[0] + a12*c[1]
		y := cy + a21*c[0] + a22*c[1]
		if !(x >= s.lo && x <= s.defW && y >= s.lo && y <= s.defH) {
			return false
		}
	}
	side := 2*m + 1
	g := s.gbuf[:side]
	var tg, tgg, tfg, tx0, tx1, tx2, ty0, ty1, ty2 float64
	fmean := s.fmean
	k := 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		s.def.Line(cx-a11*fm+a12*eta, cy-a21*fm+a22*eta, a11, a21, g)
		f := s.f[k : k+side]
		fx := s.fx[k : k+side]
		fy := s.fy[k : k+side]
		var rx0, rx1, ry0, ry1 float64
		xi := -fm
		for i := range g {
			v := g[i] - fmean
			tg += v
			tgg += v * v
			tfg += f[i] * v
			a, b := fx[i]*v, fy[i]*v
			rx0 += a
			rx1 += a * xi
			ry0 += b
			ry1 += b * xi
			xi++
		}
		tx0 += rx0
		tx1 += rx1
		tx2 += rx0 * eta
		ty0 += ry0
		ty1 += ry1
		ty2 += ry0 * eta
		k += side
	}
	*sg, *sgg, *sfg = tg, tgg, tfg
	sjg[U], sjg[Ux], sjg[Uy] = tx0, tx1, tx2
	sjg[V], sjg[Vx], sjg[Vy] = ty0, ty1, ty2
	return true
}

// pass2 is pass1 for the second-order warp.
func (s *solver) pass2(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	m := s.m
	fm := float64(m)
	side := 2*m + 1
	g := s.gbuf[:side]
	xs, ys := s.xs[:side], s.ys[:side]
	var tg, tgg, tfg float64
	var acc [12]float64
	fmean := s.fmean
	k := 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		xi := -fm
		for i := range xs {
			du, dv := Displacement(p, xi, eta)
			x, y := s.xc+xi+du, s.yc+eta+dv
			if !(x >= s.lo && x <= s.defW && y >= s.lo && y <= s.defH) {
				return false
			}
			xs[i], ys[i] = x, y
			xi++
		}
		s.def.Points(xs, ys, g)
		f := s.f[k : k+side]
		fx := s.fx[k : k+side]
		fy := s.fy[k : k+side]
		var rx0, rx1, rx2, ry0, ry1, ry2 float64
		xi = -fm
		for i := range g {
			v := g[i] - fmean
			tg += v
			tgg += v * v
			tfg += f[i] * v
			a, b := fx[i]*v, fy[i]*v
			rx0 += a
			rx1 += a * xi
			rx2 += a * xi * xi
			ry0 += b
			ry1 += b * xi
			ry2 += b * xi * xi
			xi++
		}
		acc[U] += rx0
		acc[Ux] += rx1
		acc[Uy] += rx0 * eta
		acc[Uxx] += rx2 / 2
		acc[Uxy] += rx1 * eta
		acc[Uyy] += rx0 * eta * eta / 2
		acc[V] += ry0
		acc[Vx] += ry1
		acc[Vy] += ry0 * eta
		acc[Vxx] += ry2 / 2
		acc[Vxy] += ry1 * eta
		acc[Vyy] += ry0 * eta * eta / 2
		k += side
	}
	*sg, *sgg, *sfg = tg, tgg, tfg
	*sjg = acc
	return true
}

// compose1 sets p ← p ∘ dp⁻¹ for first-order (affine) warps in homogeneous
// form [[1+ux, uy, u], [vx, 1+vy, v], [0, 0, 1]].
func compose1(p, dp *[12]float64) bool {
	a11, a12, a21, a22 := 1+dp[Ux], dp[Uy], dp[Vx], 1+dp[Vy]
	det := a11*a22 - a12*a21
	if !(math.Abs(det) > 1e-12) {
		return false
	}
	// Inverse of the increment.
	i11, i12, i21, i22 := a22/det, -a12/det, -a21/det, a11/det
	it0 := -(i11*dp[U] + i12*dp[V])
	it1 := -(i21*dp[U] + i22*dp[V])
	b11, b12, b21, b22 := 1+p[Ux], p[Uy], p[Vx], 1+p[Vy]
	p[U] = b11*it0 + b12*it1 + p[U]
	p[V] = b21*it0 + b22*it1 + p[V]
	p[Ux] = b11*i11 + b12*i21 - 1
	p[Uy] = b11*i12 + b12*i22
	p[Vx] = b21*i11 + b22*i21
	p[Vy] = b21*i12 + b22*i22 - 1
	return true
}

// warpMatrix builds the 6×6 matrix that maps the monomials
// [ξ², ξη, η², ξ, η, 1] of a point to those of its image under the
// second-order warp p, truncated at degree two (Gao, Cheng, Su & Xu 2015,
// "High-efficiency and high-accuracy digital image correlation for
// three-dimensional measurement", Opt. Lasers Eng. 65:73, from memory; the
// tests check composition against direct evaluation).
func warpMatrix(p *[12]float64, w *[36]float64) {
	a0, a1, a2 := p[U], 1+p[Ux], p[Uy]
	a3, a4, a5 := p[Uxx]/2, p[Uxy], p[Uyy]/2
	b0, b1, b2 := p[V], p[Vx], 1+p[Vy]
	b3, b4, b5 := p[Vxx]/2, p[Vxy], p[Vyy]/2
	*w = [36]float64{
		// ξ'²
		a1*a1 + 2*a0*a3, 2*a1*a2 + 2*a0*a4, a2*a2 + 2*a0*a5, 2 * a0 * a1, 2 * a0 * a2, a0 * a0,
		// ξ'η'
		a1*b1 + a0*b3 + a3*b0, a1*b2 + a2*b1 + a0*b4 + a4*b0, a2*b2 + a0*b5 + a5*b0, a0*b1 + a1*b0, a0*b2 + a2*b0, a0 * b0,
		// η'²
		b1*b1 + 2*b0*b3, 2*b1*b2 + 2*b0*b4, b2*b2 + 2*b0*b5, 2 * b0 * b1, 2 * b0 * b2, b0 * b0,
		// ξ'
		a3, a4, a5, a1, a2, a0,
		// η'
		b3, b4, b5, b1, b2, b0,
		// 1
		0, 0, 0, 0, 0, 1,
	}
}

// compose2 sets p ← p ∘ dp⁻¹ for second-order warps through warpMatrix.
func compose2(p, dp *[12]float64) bool {
	var wp, wd, inv [36]float64
	warpMatrix(p, &wp)
	warpMatrix(dp, &wd)
	if !invert6(&wd, &inv) {
		return false
	}
	var r [2][6]float64 // rows ξ' and η' of wp·inv
	for i := 0; i < 2; i++ {
		for j := 0; j < 6; j++ {
			var s float64
			for k := 0; k < 6; k++ {
				s += wp[(3+i)*6+k] * inv[k*6+j]
			}
			r[i][j] = s
		}
	}
	p[Uxx], p[Uxy], p[Uyy], p[Ux], p[Uy], p[U] = 2*r[0][0], r[0][1], 2*r[0][2], r[0][3]-1, r[0][4], r[0][5]
	p[Vxx], p[Vxy], p[Vyy], p[Vx], p[Vy], p[V] = 2*r[1][0], r[1][1], 2*r[1][2], r[1][3], r[1][4]-1, r[1][5]
	return true
}

// invert6 inverts a 6×6 matrix by Gauss–Jordan elimination with partial
// pivoting, reporting false if it is singular.
func invert6(a, inv *[36]float64) bool {
	m := *a
	*inv = [36]float64{}
	for i := 0; i < 6; i++ {
		inv[i*6+i] = 1
	}
	for c := 0; c < 6; c++ {
		piv, best := c, math.Abs(m[c*6+c])
		for r := c + 1; r < 6; r++ {
			if v := math.Abs(m[r*6+c]); v > best {
				piv, best = r, v
			}
		}
		if !(best > 1e-14) {
			return false
		}
		if piv != c {
			for k := 0; k < 6; k++ {
				m[c*6+k], m[piv*6+k] = m[piv*6+k], m[c*6+k]
				inv[c*6+k], inv[piv*6+k] = inv[piv*6+k], inv[c*6+k]
			}
		}
		d := 1 / m[c*6+c]
		for k := 0; k < 6; k++ {
			m[c*6+k] *= d
			inv[c*6+k] *= d
		}
		for r := 0; r < 6; r++ {
			if r == c {
				continue
			}
			f := m[r*6+c]
			if f == 0 {
				continue
			}
			for k := 0; k < 6; k++ {
				m[r*6+k] -= f * m[c*6+k]
				inv[r*6+k] -= f * inv[c*6+k]
			}
		}
	}
	return true
}

// cholesky factors the symmetric positive definite n×n matrix whose upper
// triangle is in a (row stride 12) as L·Lᵀ, L stored lower-triangular in l.
// It reports false if a is not numerically positive definite.
func cholesky(a *[144]float64, n int, l *[144]float64) bool {
	*l = [144]float64{}
	for j := 0; j < n; j++ {
		d := a[j*12+j]
		for k := 0; k < j; k++ {
			d -= l[j*12+k] * l[j*12+k]
		}
		if !(d > 1e-12*a[j*12+j]) {
			return false
		}
		d = math.Sqrt(d)
		l[j*12+j] = d
		for i := j + 1; i < n; i++ {
			s := a[j*12+i] // upper triangle: a[j][i] = a[i][j]
			for k := 0; k < j; k++ {
				s -= l[i*12+k] * l[j*12+k]
			}
			l[i*12+j] = s / d
		}
	}
	return true
}

// cholSolve solves L·Lᵀ x = b in place.
func cholSolve(l *[144]float64, n int, b *[12]float64) {
	for i := 0; i < n; i++ {
		s := b[i]
		for k := 0; k < i; k++ {
			s -= l[i*12+k] * b[k]
		}
		b[i] = s / l[i*12+i]
	}
	for i := n - 1; i >= 0; i-- {
		s := b[i]
		for k := i + 1; k < n; k++ {
			s -= l[k*12+i] * b[k]
		}
		b[i] = s / l[i*12+i]
	}
}

package correlate

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/spline"
	"github.com/mottledic/mottle/pkg/synth"
)

// The fast inner paths (the deformed image as a table of bicubic pieces,
// Pan, Li & Tong 2013, Exp. Mech. 53:1277, evaluated in float32 with
// incremental warped coordinates) must give the same measurement as
// interpolating the B-spline coefficients directly, which the accuracy
// tests check against the renderer's exact truth: every point keeps its
// status, and displacements agree to 2e-5 px, far below the 0.0087 px
// random error of the noisy benchmark case and below the smallest accuracy
// figure of this package (0.0003 px RMS on noise-free 16-bit images).
func TestFastPathsMatchDirect(t *testing.T) {
	m := synth.Affine{F: [2][2]float64{{1.006, 0.003}, {-0.002, 0.996}}, CX: 120, CY: 110, U: 2.7, V: -1.4}
	for _, c := range []struct {
		bits  int
		noise float64
	}{{16, 0}, {8, 1}} {
		ref, def := pair(t, m, 240, 220, c.bits, c.noise, 11)
		for _, shape := range []Shape{First, Second} {
			opt := Options{Subset: 25, Step: 6, Shape: shape}
			optQ := opt
			optQ.Interp = spline.Quintic
			direct, err := runWith(context.Background(), ref, def, opt, tuning{direct: true})
			if err != nil {
				t.Fatal(err)
			}
			// Both tables: the bicubic one and the row table
			// (spline.RowTable), whose samples round differently; and
			// the quintic row table against the quintic spline.
			directQ, err := runWith(context.Background(), ref, def, optQ, tuning{direct: true})
			if err != nil {
				t.Fatal(err)
			}
			for kind := range 3 {
				name, opt, direct := "", opt, direct
				tun := tuning{table: tableCells}
				switch kind {
				case 1:
					name, tun.table = ", row table", tableRows
				case 2:
					name, opt, direct = ", quintic row table", optQ, directQ
				}
				fast, err := runWith(context.Background(), ref, def, opt, tun)
				if err != nil {
					t.Fatal(err)
				}
				var worst float64
				for i, p := range fast.Points {
					q := direct.Points[i]
					if p.Status != q.Status {
						t.Fatalf("%d-bit shape %d%s: point %d status %v, direct %v", c.bits, shape, name, i, p.Status, q.Status)
					}
					if p.Status == OK {
						worst = math.Max(worst, math.Hypot(p.P[U]-q.P[U], p.P[V]-q.P[V]))
					}
				}
				t.Logf("%d-bit shape %d%s: %d points, max displacement difference %.2g px", c.bits, shape, name, fast.Stats.OK, worst)
				if fast.Stats.OK < fast.Stats.Total/2 || worst > 2e-5 {
					t.Errorf("%d-bit shape %d%s: %d of %d points, fast and direct paths differ by up to %.2g px, want ≤ 2e-5", c.bits, shape, name, fast.Stats.OK, fast.Stats.Total, worst)
				}
			}
		}
	}
}

// The second-order Hessian, Σ J f̃ and Σ J summed by moments equal the
// explicit outer products Σ JᵀJ of IC-GN (Baker & Matthews 2004, IJCV
// 56(3):221; second-order shape function of Lu & Cary 2000).
func TestHessian2MomentsMatchExplicit(t *testing.T) {
	id := func(x, y float64) (float64, float64) { return x, y }
	for _, c := range []struct{ size, subset int }{{60, 21}, {120, 101}} {
		img := gaussImage(c.size, c.size, 1, id)
		s := newTestSolver(t, img, img, Options{Subset: c.subset, Shape: Second})
		if s.prepare(float64(c.size/2), float64(c.size/2-1)) != OK {
			t.Fatal("prepare failed")
		}
		var h1, h2 [144]float64
		s.b0, s.sj = [12]float64{}, [12]float64{}
		s.hessian2(&h2)
		b2, j2, ss2 := s.b0, s.sj, s.sssig
		s.b0, s.sj = [12]float64{}, [12]float64{}
		s.hessian2m(&h1)
		// Each entry to 1e-12 of the scale √(H_aa H_bb) that bounds it.
		for a := 0; a < 12; a++ {
			for b := a; b < 12; b++ {
				if d := math.Abs(h1[a*12+b] - h2[a*12+b]); d > 1e-12*math.Sqrt(h2[a*13]*h2[b*13]) {
					t.Errorf("subset %d: H[%d][%d]: moments %v, explicit %v", c.subset, a, b, h1[a*12+b], h2[a*12+b])
				}
			}
			if math.Abs(b2[a]-s.b0[a]) > 1e-12*math.Sqrt(h2[a*13]*s.df*s.df) || math.Abs(j2[a]-s.sj[a]) > 1e-12*math.Sqrt(h2[a*13]*float64(s.n)) {
				t.Errorf("subset %d: b0/ΣJ[%d]: moments %v/%v, explicit %v/%v", c.subset, a, s.b0[a], s.sj[a], b2[a], j2[a])
			}
		}
		if math.Abs(ss2-s.sssig) > 1e-12*ss2 {
			t.Errorf("subset %d: SSSIG: moments %v, explicit %v", c.subset, s.sssig, ss2)
		}
	}
}

// The unrolled window dot product of the integer search equals the plain
// sum (ZNCC search of Pan, Xie & Wang 2010, Appl. Opt. 49:5501).
func TestDotMatchesPlainSum(t *testing.T) {
	for _, side := range []int{7, 8, 31} {
		stride := side + 5
		tm := make([]float64, side*side)
		g := make([]float64, side*stride)
		for k := range tm {
			tm[k] = math.Sin(float64(k) * 0.37)
		}
		for k := range g {
			g[k] = math.Cos(float64(k) * 0.11)
		}
		var want float64
		for j := 0; j < side; j++ {
			for i := 0; i < side; i++ {
				want += tm[j*side+i] * g[j*stride+i]
			}
		}
		if got := dot(tm, g, side, stride); math.Abs(got-want) > 1e-12*float64(side*side) {
			t.Errorf("side %d: dot %v, plain sum %v", side, got, want)
		}
	}
}

// The stopping rule's claim: a point accepted with Tol = 1e-4 px is within
// Tol of the limit, here the solution iterated to 1e-10 px (an early stop
// on the contraction of the last two steps, the a posteriori bound of a
// contraction mapping, failed this for second-order warps and was dropped). Checked on an analytic
// affine pair from guesses 0.02 to 0.5 px off, as propagation and seeds
// start, for both shape functions and for noise-free and noisy images.
func TestStoppingRuleWithinTol(t *testing.T) {
	a := [2][2]float64{{1.01, 0.004}, {-0.006, 0.995}}
	tu, tv, c := 1.3, -0.8, 40.0
	det := a[0][0]*a[1][1] - a[0][1]*a[1][0]
	inv := func(x, y float64) (float64, float64) {
		dx, dy := x-c-tu, y-c-tv
		return c + (a[1][1]*dx-a[0][1]*dy)/det, c + (-a[1][0]*dx+a[0][0]*dy)/det
	}
	ref := gaussImage(80, 80, 3, func(x, y float64) (float64, float64) { return x, y })
	def := gaussImage(80, 80, 3, inv)
	for _, sh := range []Shape{First, Second} {
		tight := newTestSolver(t, ref, def, Options{Subset: 25, Shape: sh, Tol: 1e-10, MaxIter: 200})
		rule := newTestSolver(t, ref, def, Options{Subset: 25, Shape: sh, Tol: 1e-4})
		for _, X := range []float64{36, 40, 44} {
			for _, off := range []float64{0.02, 0.1, 0.5} {
				if tight.prepare(X, 40) != OK || rule.prepare(X, 40) != OK {
					t.Fatal("prepare failed")
				}
				var p0 [12]float64
				p0[U], p0[V] = c+a[0][0]*(X-c)+a[0][1]*(40-c)+tu-X+off, c+a[1][0]*(X-c)+a[1][1]*(40-c)+tv-40-off/2
				want, got := tight.solve(p0), rule.solve(p0)
				if want.status != OK || got.status != OK {
					t.Fatalf("shape %d X %v off %v: status %v / %v", sh, X, off, want.status, got.status)
				}
				var d float64
				for _, q := range [][2]float64{{-12, -12}, {12, -12}, {-12, 12}, {12, 12}} {
					u1, v1 := Displacement(&want.p, q[0], q[1])
					u2, v2 := Displacement(&got.p, q[0], q[1])
					d = math.Max(d, math.Hypot(u1-u2, v1-v2))
				}
				if d > 1e-4 {
					t.Errorf("shape %d X %v off %v: stopped after %d iterations %.2g px from the limit, want ≤ 1e-4", sh, X, off, got.iter, d)
				}
				t.Logf("shape %d X %v off %v: stopped after %d iterations %.2g px from the limit (%d iterations)", sh, X, off, got.iter, d, want.iter)
			}
		}
	}
}

// smoothedVarPlain is the direct form of the predicted variance with a
// prefilter (2σ²‖Gw‖², G the separable smoothing, w the steepest-descent
// image weighted by c), with every index tested: the reference for
// smoothedVars.
func smoothedVarPlain(s *solver, c *[12]float64) float64 {
	m := s.m
	side := 2*m + 1
	r := len(s.kern) / 2
	ext := side + 2*r
	w := make([]float64, ext*ext)
	var jv [12]float64
	k := 0
	for j := -m; j <= m; j++ {
		for i := -m; i <= m; i++ {
			s.jacobian(s.fx[k], s.fy[k], float64(i), float64(j), &jv)
			var v float64
			for a := 0; a < s.np; a++ {
				v += jv[a] * c[a]
			}
			w[(j+m+r)*ext+i+m+r] = v
			k++
		}
	}
	t := make([]float64, ext*ext)
	for y := 0; y < ext; y++ {
		for x := 0; x < ext; x++ {
			var v float64
			for q, kv := range s.kern {
				if xx := x + q - r; xx >= 0 && xx < ext {
					v += kv * w[y*ext+xx]
				}
			}
			t[y*ext+x] = v
		}
	}
	var sum float64
	for y := 0; y < ext; y++ {
		for x := 0; x < ext; x++ {
			var v float64
			for q, kv := range s.kern {
				if yy := y + q - r; yy >= 0 && yy < ext {
					v += kv * t[yy*ext+x]
				}
			}
			sum += v * v
		}
	}
	return sum
}

// The predicted variances with a prefilter, computed for u and v together
// over zero-padded planes, are bitwise those of the direct form.
func TestSmoothedVarsMatchPlain(t *testing.T) {
	id := func(x, y float64) (float64, float64) { return x, y }
	img := gaussImage(80, 80, 1, id)
	for _, c := range []struct {
		shape Shape
		sigma float64
		sub   int
	}{{First, 0.8, 21}, {Second, 0.8, 31}, {First, 1.7, 15}} {
		s := newTestSolver(t, img, img, Options{Subset: c.sub, Shape: c.shape, Prefilter: c.sigma})
		for _, p := range [][2]float64{{40, 40}, {33, 45}, {47, 36}} {
			if s.prepare(p[0], p[1]) != OK {
				t.Fatal("prepare failed")
			}
			var eu, ev [12]float64
			eu[U], ev[V] = 1, 1
			cholSolve(&s.chol, s.np, &eu)
			cholSolve(&s.chol, s.np, &ev)
			wu, wv := smoothedVarPlain(s, &eu), smoothedVarPlain(s, &ev)
			// smoothedVars itself: in the GOEXPERIMENT=simd build prepare
			// takes the vector form (TestVectorSmoothedVarsMatchPortable).
			hu, hv := s.smoothedVars(&eu, &ev)
			// Bitwise where every product is rounded on its own; where
			// the compiler may fuse multiply-adds (GOAMD64=v3), the two
			// forms round differently: a sum of squares of positive
			// terms, so a relative 1e-12 bounds their few hundred
			// roundings of 2⁻⁵³.
			if near := func(a, b float64) bool {
				return a == b || !exactRounding && math.Abs(a-b) <= 1e-12*math.Abs(b)
			}; !near(hu, wu) || !near(hv, wv) {
				t.Fatalf("shape %d σ %v at %v: (%v, %v), direct form (%v, %v)", c.shape, c.sigma, p, hu, hv, wu, wv)
			}
		}
	}
}

// pass1tPixel is pass1t with the warped coordinates computed per pixel in
// fixed point, the form before the row segments: the reference of
// TestPass1tSegmentsExact. It returns Σ over the pixels of |v|·(1 + |v| +
// |f̃| + (2m+2)(|fx| + |fy|)), a bound on the magnitude of every term the
// sums take.
func (s *solver) pass1tPixel(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) (mag float64) {
	m := s.m
	fm := float64(m)
	a11, a12, a21, a22 := 1+p[Ux], p[Uy], p[Vx], 1+p[Vy]
	cx, cy := s.xc+p[U], s.yc+p[V]
	var tg, tgg, tfg float64
	var acc [12]float64
	dx, dy := int64(math.Round(a11*fixOne)), int64(math.Round(a21*fixOne))
	k := 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		x := fix(cx - a11*fm + a12*eta)
		y := fix(cy - a21*fm + a22*eta)
		var a0, a1, b0, b1 float64
		for i := -m; i <= m; i++ {
			v := float64(s.tableAt(x, y)) - s.fmean
			tg += v
			tgg += v * v
			tfg += s.f[k] * v
			// The running sums of pass1t: a1 = Σa·(m+1−ξ).
			a0 += s.fx[k] * v
			a1 += a0
			b0 += s.fy[k] * v
			b1 += b0
			mag += math.Abs(v) * (1 + math.Abs(v) + math.Abs(s.f[k]) + (2*fm+2)*(math.Abs(s.fx[k])+math.Abs(s.fy[k])))
			x += dx
			y += dy
			k++
		}
		acc[U] += a0
		acc[Ux] += (fm+1)*a0 - a1
		acc[Uy] += a0 * eta
		acc[V] += b0
		acc[Vx] += (fm+1)*b0 - b1
		acc[Vy] += b0 * eta
	}
	*sg, *sgg, *sfg, *sjg = tg, tgg, tfg, acc
	return mag
}

// The row segments of pass1t (a constant cell step and exactly advanced
// offsets) give bitwise the sums of the per-pixel fixed-point coordinates,
// for small strains and for warps whose cell steps are 0, ±1 or 2 and whose
// fractional rest is negative, positive or zero; and so do those of pass1r
// on the row table and pass1q on the quintic row table (kind 1, 2).
func TestPass1tSegmentsExact(t *testing.T) {
	for kind := range 3 {
		pass1SegmentsExact(t, kind)
	}
}

func pass1SegmentsExact(t *testing.T, kind int) {
	id := func(x, y float64) (float64, float64) { return x, y }
	img := gaussImage(120, 120, 5, id)
	opt := Options{Subset: 21}
	if kind == 2 {
		opt.Interp = spline.Quintic
	}
	s := newTestSolver(t, img, img, opt)
	pass := s.pass1t
	switch kind {
	case 0:
		s.useTable(mustTable(t, img))
	case 1:
		s.useRowTable(mustRowTable(t, img))
		pass = s.pass1r
	case 2:
		s.useQuinticRowTable(mustQuinticRowTable(t, img))
		pass = s.pass1q
	}
	rows := kind
	if s.prepare(60, 59) != OK {
		t.Fatal("prepare failed")
	}
	c, sn := math.Cos(2), math.Sin(2) // a rotation by 115°
	for _, p := range [][12]float64{
		{U: 4.3, Ux: 0.005, Uy: 0.002, V: -2.6, Vx: -0.001, Vy: -0.003},
		{U: -3.1, Ux: -0.004, Uy: -0.01, V: 2.2, Vx: 0.003, Vy: 0.02},
		{U: 0.5, V: 0.25},
		{U: 1, Ux: 0.3, Uy: 0.2, V: -2, Vx: -0.2, Vy: 0.1},
		{U: 0.7, Ux: 0.49, V: 0.3, Vx: 0.51},
		{U: 2.5, Ux: c - 1, Uy: -sn, V: -1.5, Vx: sn, Vy: c - 1},
		{U: -1.2, Ux: -1.25, Uy: 0.3, V: 0.4, Vx: -0.5, Vy: -1.5},
	} {
		var a, b [3]float64
		var ja, jb [12]float64
		if !pass(&p, &a[0], &a[1], &a[2], &ja) {
			t.Fatalf("warp %v, table kind %d: the pass left the image", p[:6], rows)
		}
		mag := s.pass1tPixel(&p, &b[0], &b[1], &b[2], &jb)
		// Bitwise where every product is rounded on its own. Where the
		// compiler may fuse multiply-adds (GOAMD64=v3) the two functions
		// may fuse different products of the same sums, so they are
		// compared within 1e-13 of the terms' magnitude (441 terms, a
		// few roundings of 2⁻⁵³ each): the offsets and cells must still
		// be the same, a wrong cell or step moves a sum by far more.
		same := func(x, y float64) bool { return x == y || !exactRounding && math.Abs(x-y) <= 1e-13*mag }
		ok := true
		for q := range a {
			ok = ok && same(a[q], b[q])
		}
		for q := range ja {
			ok = ok && same(ja[q], jb[q])
		}
		if !ok {
			t.Errorf("warp %v, table kind %d: segments %v %v, per pixel %v %v", p[:6], rows, a, ja[:6], b, jb[:6])
		}
	}
}

func mustTable(t *testing.T, g *imageio.Gray) *spline.Table {
	t.Helper()
	sp, err := spline.New(g, spline.Cubic)
	if err != nil {
		t.Fatal(err)
	}
	tab, err := spline.NewTable(t.Context(), sp, 1)
	if err != nil {
		t.Fatal(err)
	}
	return tab
}

func mustQuinticRowTable(t *testing.T, g *imageio.Gray) *spline.QuinticRowTable {
	t.Helper()
	sp, err := spline.New(g, spline.Quintic)
	if err != nil {
		t.Fatal(err)
	}
	tab, err := spline.NewQuinticRowTable(t.Context(), sp, 1)
	if err != nil {
		t.Fatal(err)
	}
	return tab
}

func mustRowTable(t *testing.T, g *imageio.Gray) *spline.RowTable {
	t.Helper()
	sp, err := spline.New(g, spline.Cubic)
	if err != nil {
		t.Fatal(err)
	}
	tab, err := spline.NewRowTable(t.Context(), sp, 1)
	if err != nil {
		t.Fatal(err)
	}
	return tab
}

// tableAt evaluates the solver's table (the row table if it has one) at
// the fixed-point position (x, y), as the passes do: a sample of the
// plain per-pixel forms below.
func (s *solver) tableAt(x, y int64) float32 {
	tx, ty := float32(x&fixMask)*fixScale, float32(y&fixMask)*fixScale
	ix, iy := int(x>>fixBits), int(y>>fixBits)
	if s.rtab != nil {
		return spline.EvalRows(s.rtab.Coefficients(), 4*(iy*s.rtab.W+ix), 4*s.rtab.W, tx, ty)
	}
	if s.qtab != nil {
		return spline.EvalRows5(s.qtab.Coefficients(), 6*(iy*s.qtab.W+ix), 6*s.qtab.W, tx, ty)
	}
	return spline.Eval(s.tab.Cell(ix, iy), tx, ty)
}

// passTableDirect is pass1t or pass2t (second) summed the plain way: the
// warped positions per pixel in fixed point, one spline.Eval per pixel and
// every term of Σ J g (Baker & Matthews 2004, IJCV 56(3):221) multiplied
// out by ξ and η, with Σ|term| per sum for the rounding bound.
func (s *solver) passTableDirect(p *[12]float64, second bool) (sum, abs [15]float64) {
	m := s.m
	fm := float64(m)
	ddx, ddy := int64(0), int64(0)
	if second {
		ddx, ddy = int64(math.Round(p[Uxx]*fixOne)), int64(math.Round(p[Vxx]*fixOne))
	}
	k := 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		du, dv := Displacement(p, -fm, eta)
		x, y := fix(s.xc-fm+du), fix(s.yc+eta+dv)
		dx := int64(math.Round((1 + p[Ux] + p[Uxx]*(0.5-fm) + p[Uxy]*eta) * fixOne))
		dy := int64(math.Round((p[Vx] + p[Vxx]*(0.5-fm) + p[Vxy]*eta) * fixOne))
		for i := -m; i <= m; i++ {
			xi := float64(i)
			v := float64(s.tableAt(x, y)) - s.fmean
			a, b := s.fx[k]*v, s.fy[k]*v
			terms := [15]float64{
				v, v * v, s.f[k] * v,
				a, a * xi, a * eta, a * xi * xi / 2, a * xi * eta, a * eta * eta / 2,
				b, b * xi, b * eta, b * xi * xi / 2, b * xi * eta, b * eta * eta / 2,
			}
			for n, t := range terms {
				sum[n] += t
				abs[n] += math.Abs(t)
			}
			x += dx
			y += dy
			dx += ddx
			dy += ddy
			k++
		}
	}
	return sum, abs
}

// The running sums by which pass1t and pass2t (and pass1r and pass2r on
// the row table) take the moments in ξ of a subset row give the plainly
// summed moments to rounding (a relative 1e-12 of the sum of the terms'
// magnitudes), and Σg, Σg², Σf̃g as well.
func TestTablePassMomentsMatchDirect(t *testing.T) {
	for kind := range 3 {
		tablePassMomentsMatchDirect(t, kind)
	}
}

// tablePassMomentsMatchDirect checks the bicubic table's passes (kind 0),
// the row table's (1) or the quintic row table's (2).
func tablePassMomentsMatchDirect(t *testing.T, kind int) {
	id := func(x, y float64) (float64, float64) { return x, y }
	img := gaussImage(120, 120, 5, id)
	// Parameter indices of the 12 second-order sums in passTableDirect's order.
	order := [12]int{U, Ux, Uy, Uxx, Uxy, Uyy, V, Vx, Vy, Vxx, Vxy, Vyy}
	for _, shape := range []Shape{First, Second} {
		opt := Options{Subset: 21, Shape: shape}
		if kind == 2 {
			opt.Interp = spline.Quintic
		}
		s := newTestSolver(t, img, img, opt)
		pass1, pass2 := s.pass1t, s.pass2t
		switch kind {
		case 0:
			s.useTable(mustTable(t, img))
		case 1:
			s.useRowTable(mustRowTable(t, img))
			pass1, pass2 = s.pass1r, s.pass2r
		case 2:
			s.useQuinticRowTable(mustQuinticRowTable(t, img))
			pass1, pass2 = s.pass1q, s.pass2q
		}
		rows := kind
		if s.prepare(60, 59) != OK {
			t.Fatal("prepare failed")
		}
		for _, p := range [][12]float64{
			{U: 4.3, Ux: 0.005, Uy: 0.002, V: -2.6, Vx: -0.001, Vy: -0.003},
			{U: -3.1, Ux: -0.04, Uy: -0.01, V: 2.2, Vx: 0.03, Vy: 0.02, Uxx: 0.002, Uxy: -0.001, Uyy: 0.0005, Vxx: -0.003, Vxy: 0.001, Vyy: 0.002},
			{U: 0.5, V: 0.25},
		} {
			if shape == First {
				p[Uxx], p[Uxy], p[Uyy], p[Vxx], p[Vxy], p[Vyy] = 0, 0, 0, 0, 0, 0
			}
			var got [3]float64
			var jg [12]float64
			ok := false
			if shape == First {
				ok = pass1(&p, &got[0], &got[1], &got[2], &jg)
			} else {
				ok = pass2(&p, &got[0], &got[1], &got[2], &jg)
			}
			if !ok {
				t.Fatalf("shape %d warp %v, table kind %d: left the image", shape, p, rows)
			}
			want, abs := s.passTableDirect(&p, shape == Second)
			var all [15]float64
			copy(all[:3], got[:])
			for n, q := range order {
				all[3+n] = jg[q]
			}
			for n := range all {
				if shape == First && (n-3)%6 >= 3 {
					continue // second-order sums, not computed
				}
				if d := math.Abs(all[n] - want[n]); d > 1e-12*abs[n] {
					t.Errorf("shape %d warp %v, table kind %d: sum %d is %v, plainly summed %v (|difference| %.2g of Σ|term| %.2g)", shape, p, rows, n, all[n], want[n], d, abs[n])
				}
			}
		}
	}
}

// rowInside decides as stepping along the row pixel by pixel does, for
// rows that stay inside, leave at an end, or leave and come back (a
// quadratic sequence whose extreme lies inside the row), and for steps so
// large that it steps itself.
func TestRowInsideMatchesStepping(t *testing.T) {
	step := func(x, dx, ddx int64, n int, lo, hi int64) bool {
		for i := 0; i < n; i++ {
			if !(x >= lo && x <= hi) {
				return false
			}
			x += dx
			dx += ddx
		}
		return true
	}
	rng := rand.New(rand.NewPCG(3, 14))
	lo, hi := fix(2), fix(117)
	var in, out int
	for trial := 0; trial < 200000; trial++ {
		n := 1 + rng.IntN(61)
		x := lo + rng.Int64N(hi-lo+1)
		if rng.IntN(8) == 0 {
			x = []int64{lo, hi, lo - 1, hi + 1}[rng.IntN(4)]
		}
		scale := []float64{1e-3, 1, 10, 1e9}[rng.IntN(4)]
		dx := int64((rng.Float64()*2 - 1) * scale * fixOne)
		ddx := int64((rng.Float64()*2 - 1) * scale * fixOne / float64(n))
		if rng.IntN(4) == 0 {
			ddx = 0
		}
		want := step(x, dx, ddx, n, lo, hi)
		if got := rowInside(x, dx, ddx, n, lo, hi); got != want {
			t.Fatalf("x %d dx %d ddx %d n %d: rowInside %v, stepping %v", x, dx, ddx, n, got, want)
		}
		if want {
			in++
		} else {
			out++
		}
	}
	if in < 1000 || out < 1000 {
		t.Errorf("cases inside %d, outside %d: the draw does not cover both", in, out)
	}
}

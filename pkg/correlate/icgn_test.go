package correlate

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/spline"
)

// gaussImage is a sum of Gaussian spots evaluated exactly at pixel centres
// shifted by the map (x, y) ↦ X(x, y): an analytic image for unit tests.
func gaussImage(w, h int, seed uint64, inv func(x, y float64) (float64, float64)) *imageio.Gray {
	r := rand.New(rand.NewPCG(seed, 3))
	type spot struct{ x, y, s, a float64 }
	var spots []spot
	for i := 0; i < w*h/12; i++ {
		spots = append(spots, spot{r.Float64()*float64(w+20) - 10, r.Float64()*float64(h+20) - 10, 1.2 + r.Float64(), 60 + 60*r.Float64()})
	}
	g := imageio.NewGray(w, h)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			X, Y := inv(float64(x), float64(y))
			v := 20.0
			for _, s := range spots {
				dx, dy := X-s.x, Y-s.y
				if d2 := dx*dx + dy*dy; d2 < 36*s.s*s.s {
					v += s.a * math.Exp(-d2/(2*s.s*s.s))
				}
			}
			g.Set(x, y, float32(v))
		}
	}
	return g
}

func newTestSolver(t *testing.T, ref, def *imageio.Gray, opt Options) *solver {
	opt.fill()
	rs, err := spline.New(ref, opt.Interp)
	if err != nil {
		t.Fatal(err)
	}
	ds, _ := spline.New(def, opt.Interp)
	gx, gy, _ := rs.SampleGradients(t.Context(), 1)
	return newSolver(ref, gx, gy, rs, ds, &opt, 0)
}

// The factorised first-order Hessian equals the explicit Σ JᵀJ of the
// inverse compositional Gauss–Newton method (Baker & Matthews 2004, "Lucas-
// Kanade 20 years on: a unifying framework", IJCV 56(3):221; Pan, Li & Tong
// 2013, Exp. Mech. 53:1277).
func TestHessian1MatchesExplicit(t *testing.T) {
	id := func(x, y float64) (float64, float64) { return x, y }
	img := gaussImage(60, 60, 1, id)
	s := newTestSolver(t, img, img, Options{Subset: 21})
	if s.prepare(30, 29) != OK {
		t.Fatal("prepare failed")
	}
	var h1, h2 [144]float64
	s.hessian1(&h1)
	b1, j1 := s.b0, s.sj
	s.b0, s.sj = [12]float64{}, [12]float64{}
	s.hessian2(&h2) // with np = 6: explicit outer products
	for a := 0; a < 6; a++ {
		for b := a; b < 6; b++ {
			if d := math.Abs(h1[a*12+b] - h2[a*12+b]); d > 1e-9*math.Abs(h2[a*12+b])+1e-9 {
				t.Errorf("H[%d][%d]: factorised %v, explicit %v", a, b, h1[a*12+b], h2[a*12+b])
			}
		}
		if math.Abs(b1[a]-s.b0[a]) > 1e-9*math.Abs(s.b0[a])+1e-6 || math.Abs(j1[a]-s.sj[a]) > 1e-9*math.Abs(s.sj[a])+1e-6 {
			t.Errorf("b0/ΣJ[%d] differ: %v/%v vs %v/%v", a, b1[a], j1[a], s.b0[a], s.sj[a])
		}
	}
}

// IC-GN (Baker & Matthews 2004; Pan, Li & Tong 2013) recovers an exactly
// known affine map of an analytic image (Gaussian spots evaluated in closed
// form, no renderer involved), for both shape functions and both spline
// orders, from a guess 1.5 px off. Over eight spot patterns, the worst
// displacement and F errors must stay within about 1.5× of those measured
// when the bounds were set (2026-12-01, worst of either shape function:
// cubic 0.0012 px and 1.2e-4, quintic 1.6e-4 px and 1.7e-5; 1 − ZNCC at
// most 4.1e-6).
func TestSolveAnalytic(t *testing.T) {
	// def(x) = ref(X) with x = X + u(X): sample the spots at X = A⁻¹(x − c) + c − t.
	a := [2][2]float64{{1.02, 0.01}, {-0.015, 0.99}}
	tu, tv := 2.3, -1.6
	c := 40.0
	det := a[0][0]*a[1][1] - a[0][1]*a[1][0]
	inv := func(x, y float64) (float64, float64) {
		dx, dy := x-c-tu, y-c-tv
		return c + (a[1][1]*dx-a[0][1]*dy)/det, c + (-a[1][0]*dx+a[0][0]*dy)/det
	}
	bounds := map[spline.Order]struct{ u, f float64 }{spline.Cubic: {0.0018, 1.8e-4}, spline.Quintic: {2.4e-4, 2.6e-5}}
	for seed := uint64(1); seed <= 8; seed++ {
		ref := gaussImage(80, 80, seed+1, func(x, y float64) (float64, float64) { return x, y })
		def := gaussImage(80, 80, seed+1, inv)
		for _, sh := range []Shape{First, Second} {
			for _, o := range []spline.Order{spline.Cubic, spline.Quintic} {
				s := newTestSolver(t, ref, def, Options{Subset: 25, Shape: sh, Interp: o, Tol: 1e-6})
				X, Y := 38.0, 41.0
				if st := s.prepare(X, Y); st != OK {
					t.Fatal(st)
				}
				// True u at (X, Y): x − X with x = c + A(X − c) + t.
				wu := c + a[0][0]*(X-c) + a[0][1]*(Y-c) + tu - X
				wv := c + a[1][0]*(X-c) + a[1][1]*(Y-c) + tv - Y
				var p0 [12]float64
				p0[U], p0[V] = wu+1.5, wv-1.0
				r := s.solve(p0)
				if r.status != OK || !r.converged {
					t.Fatalf("seed %d shape %d %v: status %v", seed, sh, o, r.status)
				}
				errU := math.Hypot(r.p[U]-wu, r.p[V]-wv)
				errF := math.Max(math.Abs(r.p[Ux]-(a[0][0]-1)), math.Abs(r.p[Vy]-(a[1][1]-1)))
				errF = math.Max(errF, math.Max(math.Abs(r.p[Uy]-a[0][1]), math.Abs(r.p[Vx]-a[1][0])))
				t.Logf("seed %d shape %d %v: error %.2g px, F error %.2g, ZNCC %.8f", seed, sh, o, errU, errF, r.zncc)
				if b := bounds[o]; errU > b.u || errF > b.f || 1-r.zncc > 6e-6 {
					t.Errorf("seed %d shape %d %v: error %.2g px, F error %.2g, ZNCC %.8f: want ≤ %.2g px, ≤ %.2g, 1 − ZNCC ≤ 6e-6", seed, sh, o, errU, errF, r.zncc, b.u, b.f)
				}
			}
		}
	}
}

// compose2 must agree with composing the two quadratic maps directly, up
// to the truncated third- and fourth-order terms, which vanish as dp → 0
// (the inverse compositional update W(p) ← W(p) ∘ W(Δp)⁻¹ of Baker &
// Matthews 2004; for first-order warps the composition is the exact
// product of affine maps).
func TestCompose2(t *testing.T) {
	p := [12]float64{1.2, 0.02, -0.01, -0.7, 0.015, 0.03, 1e-3, -5e-4, 2e-4, -3e-4, 4e-4, 1e-4}
	dp := [12]float64{0.05, 1e-3, -2e-3, 0.03, 1.5e-3, -1e-3, 2e-5, -1e-5, 3e-5, 1e-5, -2e-5, 1e-5}
	q := p
	if !compose2(&q, &dp) {
		t.Fatal("compose2 failed")
	}
	// q ∘ dp should equal p: map a point by dp, then by q, compare with p.
	for _, pt := range [][2]float64{{0, 0}, {5, -3}, {-8, 7}, {10, 10}} {
		du, dv := Displacement(&dp, pt[0], pt[1])
		x, y := pt[0]+du, pt[1]+dv
		qu, qv := Displacement(&q, x, y)
		pu, pv := Displacement(&p, pt[0], pt[1])
		if d := math.Hypot(x+qu-(pt[0]+pu), y+qv-(pt[1]+pv)); d > 1e-4 {
			t.Errorf("at %v: q∘dp differs from p by %.2g px", pt, d)
		}
	}
	// First-order warps compose exactly through either path.
	p1 := [12]float64{1.2, 0.02, -0.01, -0.7, 0.015, 0.03}
	d1 := [12]float64{0.05, 1e-3, -2e-3, 0.03, 1.5e-3, -1e-3}
	a, b := p1, p1
	compose1(&a, &d1)
	compose2(&b, &d1)
	for k := range a {
		if math.Abs(a[k]-b[k]) > 1e-12 {
			t.Errorf("parameter %d: compose1 %v, compose2 %v", k, a[k], b[k])
		}
	}
}

// Recentre keeps the displacement field: the recentred shape function
// evaluated at offset (x − d) gives the original at x (a Taylor polynomial
// re-expanded about another point; common practice).
func TestRecentre(t *testing.T) {
	P := [12]float64{1, 0.01, -0.02, 2, 0.03, 0.005, 1e-3, 2e-3, -1e-3, 4e-4, -5e-4, 6e-4}
	q := Recentre(P, 8, -5)
	for _, x := range [][2]float64{{0, 0}, {8, -5}, {3, 4}, {-10, 12}} {
		u0, v0 := Displacement(&P, x[0], x[1])
		u1, v1 := Displacement(&q, x[0]-8, x[1]+5)
		if math.Abs(u0-u1) > 1e-12 || math.Abs(v0-v1) > 1e-12 {
			t.Errorf("at %v: (%v, %v) vs (%v, %v)", x, u0, v0, u1, v1)
		}
	}
}

// The fused first-order prepare of grid points (prepare1: one read of the
// subset for samples and Hessian row sums, Σ J f̃ as Σ J f − f̄ Σ J) gives
// the reference data of the general path (prepareAny: copy, centre, then
// hessian1) to rounding: Baker & Matthews 2004, IJCV 56(3):221 for the
// quantities.
func TestPrepare1MatchesGeneral(t *testing.T) {
	id := func(x, y float64) (float64, float64) { return x, y }
	img := gaussImage(90, 80, 4, id)
	near := func(a, b, scale float64) bool { return math.Abs(a-b) <= 1e-12*scale }
	// Sides 21, 25, 31: 5, 1 and 7 beyond a multiple of eight (the vector
	// prepare's groups).
	for _, sub := range []int{21, 25, 31} {
		s := newTestSolver(t, img, img, Options{Subset: sub})
		m := sub / 2
		for _, c := range [][2]int{{m, m}, {45, 40}, {89 - m, 79 - m}, {33, 52}} {
			if st := s.prepare(float64(c[0]), float64(c[1])); st != OK {
				t.Fatalf("centre %v: prepare %v", c, st)
			}
			f1 := append([]float64(nil), s.f...)
			b1, j1, df1, mean1, hu1, hv1, ss1, ch1 := s.b0, s.sj, s.df, s.fmean, s.hUU, s.hVV, s.sssig, s.chol
			if st := s.prepareAny(true); st != OK {
				t.Fatalf("centre %v: prepareAny %v", c, st)
			}
			var bmax, jmax float64
			for a := 0; a < 6; a++ {
				bmax, jmax = math.Max(bmax, math.Abs(s.b0[a])), math.Max(jmax, math.Abs(s.sj[a]))
			}
			for a := 0; a < 12; a++ {
				if !near(b1[a], s.b0[a], bmax) || !near(j1[a], s.sj[a], jmax) {
					t.Errorf("centre %v: Σ J f̃[%d] %v / %v, Σ J[%d] %v / %v", c, a, b1[a], s.b0[a], a, j1[a], s.sj[a])
				}
			}
			for k := range f1 {
				if !near(f1[k], s.f[k], s.df) {
					t.Fatalf("centre %v: f̃[%d] %v / %v", c, k, f1[k], s.f[k])
				}
			}
			for k := range ch1 {
				if !near(ch1[k], s.chol[k], math.Abs(s.chol[0])) {
					t.Errorf("centre %v: Cholesky factor [%d] %v / %v", c, k, ch1[k], s.chol[k])
				}
			}
			if !near(df1, s.df, s.df) || !near(mean1, s.fmean, s.fmean) || !near(hu1, s.hUU, s.hUU) || !near(hv1, s.hVV, s.hVV) || !near(ss1, s.sssig, s.sssig) {
				t.Errorf("centre %v: ‖f̃‖ %v / %v, f̄ %v / %v, (H⁻¹)uu %v / %v, (H⁻¹)vv %v / %v, Σ∇f² %v / %v",
					c, df1, s.df, mean1, s.fmean, hu1, s.hUU, hv1, s.hVV, ss1, s.sssig)
			}
		}
	}
}

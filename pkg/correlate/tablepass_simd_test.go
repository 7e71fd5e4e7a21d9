//go:build goexperiment.simd && amd64

package correlate

import (
	"context"
	"math"
	"math/rand/v2"
	"simd/archsimd"
	"testing"

	"github.com/mottledic/mottle/pkg/spline"
	"github.com/mottledic/mottle/pkg/synth"
)

// The vector pass must give the sums of the portable pass to float
// rounding, for any warp and subset size (including sides that are not a
// multiple of four), and a run with it the same measurement as a run with
// the portable pass.
func TestVectorPassMatchesPortable(t *testing.T) {
	if !vectorPass {
		t.Skip("this CPU has no AVX-512 and FMA: the vector pass is not used")
	}
	m := synth.Affine{F: [2][2]float64{{1.006, 0.003}, {-0.002, 0.996}}, CX: 120, CY: 110, U: 2.7, V: -1.4}
	ref, def := pair(t, m, 240, 220, 8, 1, 11)
	rng := rand.New(rand.NewPCG(3, 4))
	for _, tc := range tableCases() {
		for _, subset := range []int{21, 25, 31, 33} {
			r, err := newRun(context.Background(), ref, def, Options{Subset: subset, Threads: 1, Interp: tc.interp}, tuning{table: tc.kind})
			if err != nil {
				t.Fatal(err)
			}
			if err := r.tabulate(context.Background(), 1<<30); err != nil {
				t.Fatal(err)
			}
			s := r.solvers[0]
			if !tc.built(s) {
				t.Fatalf("%s: the run built another table", tc.name)
			}
			for trial := 0; trial < 200; trial++ {
				xc, yc := float64(40+rng.IntN(160)), float64(40+rng.IntN(140))
				if s.prepare(xc, yc) != OK {
					continue
				}
				var p [12]float64
				p[U], p[V] = 4*rng.Float64()-2, 4*rng.Float64()-2
				p[Ux], p[Uy], p[Vx], p[Vy] = 0.04*rng.Float64()-0.02, 0.04*rng.Float64()-0.02, 0.04*rng.Float64()-0.02, 0.04*rng.Float64()-0.02
				var a, b [12]float64
				var ag, agg, afg, bg, bgg, bfg float64
				oka := tc.pass1(s, &p, &ag, &agg, &afg, &a)
				okb := s.pass1v(&p, &bg, &bgg, &bfg, &b)
				if oka != okb {
					t.Fatalf("%s, subset %d: portable pass reports %v, vector pass %v", tc.name, subset, oka, okb)
				}
				if !oka {
					continue
				}
				// Each term is a weight times g − f̄, and g is interpolated in
				// float32: the passes differ by about 1e-7·|g| per term (other
				// evaluation order, fused multiply-adds), times the sum of the
				// absolute weights (1 for Σg, 2|g − f̄| for Σg², |f̃| for Σf̃g, |J|
				// for ΣJg).
				n := float64(s.n)
				delta := 1e-6 * (math.Abs(s.fmean) + 6*math.Sqrt(agg/n))
				var wf, wfx, wfy, wxx, wxy, wyx, wyy float64
				for k := range s.f {
					xi, eta := float64(k%(2*s.m+1)-s.m), float64(k/(2*s.m+1)-s.m)
					wf += math.Abs(s.f[k])
					wfx += math.Abs(s.fx[k])
					wfy += math.Abs(s.fy[k])
					wxx += math.Abs(s.fx[k] * xi)
					wxy += math.Abs(s.fx[k] * eta)
					wyx += math.Abs(s.fy[k] * xi)
					wyy += math.Abs(s.fy[k] * eta)
				}
				for _, d := range []struct {
					name string
					x, y float64
					w    float64
				}{
					{"Σg", ag, bg, n}, {"Σg²", agg, bgg, 12 * math.Sqrt(agg*n)}, {"Σf̃g", afg, bfg, wf},
					{"ΣJg[U]", a[U], b[U], wfx}, {"ΣJg[Ux]", a[Ux], b[Ux], wxx}, {"ΣJg[Uy]", a[Uy], b[Uy], wxy},
					{"ΣJg[V]", a[V], b[V], wfy}, {"ΣJg[Vx]", a[Vx], b[Vx], wyx}, {"ΣJg[Vy]", a[Vy], b[Vy], wyy},
				} {
					if math.Abs(d.x-d.y) > delta*d.w {
						t.Fatalf("%s, subset %d trial %d: %s portable %v, vector %v, differ by more than %.2g", tc.name, subset, trial, d.name, d.x, d.y, delta*d.w)
					}
				}
			}
			r.stop()
		}
		// A whole run: same statuses, displacements within 5e-6 px (float32
		// rounding of the interpolated values moves noisy points by up to
		// ~1e-6 px, as in TestFastPathsMatchDirect).
		opt := Options{Subset: 25, Step: 6, Interp: tc.interp}
		v, err := runWith(context.Background(), ref, def, opt, tuning{table: tc.kind})
		if err != nil {
			t.Fatal(err)
		}
		pt, err := runWith(context.Background(), ref, def, opt, tuning{table: tc.kind, portable: true})
		if err != nil {
			t.Fatal(err)
		}
		var worst float64
		for i, p := range v.Points {
			q := pt.Points[i]
			if p.Status != q.Status {
				t.Fatalf("point %d: status %v with the vector pass, %v with the portable one", i, p.Status, q.Status)
			}
			if p.Status == OK {
				worst = math.Max(worst, math.Hypot(p.P[U]-q.P[U], p.P[V]-q.P[V]))
			}
		}
		t.Logf("%s: %d points, largest displacement difference %.2g px", tc.name, v.Stats.OK, worst)
		if v.Stats.OK < v.Stats.Total/2 || worst > 5e-6 {
			t.Errorf("%s: %d of %d points, vector and portable passes differ by up to %.2g px, want ≤ 5e-6", tc.name, v.Stats.OK, v.Stats.Total, worst)
		}
	}
}

// tableCase is one of the deformed-image tables and its portable passes,
// which the vector passes must match.
type tableCase struct {
	name         string
	kind         tableKind
	interp       spline.Order
	pass1, pass2 func(s *solver, p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool
}

func tableCases() []tableCase {
	return []tableCase{
		{"bicubic table", tableCells, spline.Cubic, (*solver).pass1t, (*solver).pass2t},
		{"row table", tableRows, spline.Cubic, (*solver).pass1r, (*solver).pass2r},
		{"quintic row table", tableDefault, spline.Quintic, (*solver).pass1q, (*solver).pass2q},
	}
}

// built reports whether the run's solver interpolates from the table of tc.
func (tc tableCase) built(s *solver) bool {
	switch {
	case tc.interp == spline.Quintic:
		return s.qtab != nil
	case tc.kind == tableRows:
		return s.rtab != nil && s.qtab == nil
	}
	return s.tab != nil
}

// The vector prepare gives prepare1's reference data to rounding, for
// sides 21, 25, 31 and 33 (5, 1, 7 and 1 beyond a multiple of eight) at
// random grid points.
func TestVectorPrepareMatchesPortable(t *testing.T) {
	if !vectorPass {
		t.Skip("this CPU has no AVX-512 and FMA: the vector prepare is not used")
	}
	m := synth.Affine{F: [2][2]float64{{1.006, 0.003}, {-0.002, 0.996}}, CX: 120, CY: 110, U: 2.7, V: -1.4}
	ref, def := pair(t, m, 240, 220, 8, 1, 11)
	rng := rand.New(rand.NewPCG(5, 6))
	near := func(a, b, scale float64) bool { return math.Abs(a-b) <= 1e-12*scale }
	for _, subset := range []int{21, 25, 31, 33} {
		r, err := newRun(context.Background(), ref, def, Options{Subset: subset, Threads: 1}, tuning{})
		if err != nil {
			t.Fatal(err)
		}
		s := r.solvers[0]
		for trial := 0; trial < 50; trial++ {
			ix, iy := 20+rng.IntN(200), 20+rng.IntN(180)
			st1 := s.prepare1(ix, iy)
			f1 := append([]float64(nil), s.f...)
			fx1 := append([]float64(nil), s.fx...)
			b1, j1, df1, mean1, hu1, hv1, ss1, ch1 := s.b0, s.sj, s.df, s.fmean, s.hUU, s.hVV, s.sssig, s.chol
			st2 := s.prepare1v(ix, iy)
			if st1 != st2 {
				t.Fatalf("subset %d at (%d, %d): prepare1 %v, prepare1v %v", subset, ix, iy, st1, st2)
			}
			if st1 != OK {
				continue
			}
			var bmax, jmax float64
			for a := 0; a < 6; a++ {
				bmax, jmax = math.Max(bmax, math.Abs(s.b0[a])), math.Max(jmax, math.Abs(s.sj[a]))
			}
			for a := 0; a < 12; a++ {
				if !near(b1[a], s.b0[a], bmax) || !near(j1[a], s.sj[a], jmax) {
					t.Fatalf("subset %d at (%d, %d): Σ J f̃[%d] %v / %v, Σ J[%d] %v / %v", subset, ix, iy, a, b1[a], s.b0[a], a, j1[a], s.sj[a])
				}
			}
			for k := range f1 {
				if !near(f1[k], s.f[k], s.df) || fx1[k] != s.fx[k] {
					t.Fatalf("subset %d at (%d, %d): f̃[%d] %v / %v, fx %v / %v", subset, ix, iy, k, f1[k], s.f[k], fx1[k], s.fx[k])
				}
			}
			for k := range ch1 {
				if !near(ch1[k], s.chol[k], math.Abs(s.chol[0])) {
					t.Fatalf("subset %d at (%d, %d): Cholesky factor [%d] %v / %v", subset, ix, iy, k, ch1[k], s.chol[k])
				}
			}
			if !near(df1, s.df, s.df) || !near(mean1, s.fmean, s.fmean) || !near(hu1, s.hUU, s.hUU) || !near(hv1, s.hVV, s.hVV) || !near(ss1, s.sssig, s.sssig) {
				t.Fatalf("subset %d at (%d, %d): ‖f̃‖ %v / %v, f̄ %v / %v, (H⁻¹)uu %v / %v, (H⁻¹)vv %v / %v, Σ∇f² %v / %v",
					subset, ix, iy, df1, s.df, mean1, s.fmean, hu1, s.hUU, hv1, s.hVV, ss1, s.sssig)
			}
		}
		r.stop()
	}
}

// The same for the second-order prepare against prepareAny.
func TestVectorPrepare2MatchesPortable(t *testing.T) {
	if !vectorPass {
		t.Skip("this CPU has no AVX-512 and FMA: the vector prepare is not used")
	}
	m := synth.Affine{F: [2][2]float64{{1.006, 0.003}, {-0.002, 0.996}}, CX: 120, CY: 110, U: 2.7, V: -1.4}
	ref, def := pair(t, m, 240, 220, 8, 1, 11)
	rng := rand.New(rand.NewPCG(5, 6))
	near := func(a, b, scale float64) bool { return math.Abs(a-b) <= 1e-12*scale }
	for _, subset := range []int{21, 25, 31, 33} {
		r, err := newRun(context.Background(), ref, def, Options{Subset: subset, Shape: Second, Threads: 1}, tuning{})
		if err != nil {
			t.Fatal(err)
		}
		s := r.solvers[0]
		for trial := 0; trial < 50; trial++ {
			ix, iy := 20+rng.IntN(200), 20+rng.IntN(180)
			s.xc, s.yc = float64(ix), float64(iy)
			st1 := s.prepareAny(true)
			f1 := append([]float64(nil), s.f...)
			fx1 := append([]float64(nil), s.fx...)
			b1, j1, df1, mean1, hu1, hv1, ss1, ch1 := s.b0, s.sj, s.df, s.fmean, s.hUU, s.hVV, s.sssig, s.chol
			st2 := s.prepare2v(ix, iy)
			if st1 != st2 {
				t.Fatalf("subset %d at (%d, %d): prepareAny %v, prepare2v %v", subset, ix, iy, st1, st2)
			}
			if st1 != OK {
				continue
			}
			var bmax, jmax float64
			for a := 0; a < 12; a++ {
				bmax, jmax = math.Max(bmax, math.Abs(s.b0[a])), math.Max(jmax, math.Abs(s.sj[a]))
			}
			for a := 0; a < 12; a++ {
				if !near(b1[a], s.b0[a], bmax) || !near(j1[a], s.sj[a], jmax) {
					t.Fatalf("subset %d at (%d, %d): Σ J f̃[%d] %v / %v, Σ J[%d] %v / %v", subset, ix, iy, a, b1[a], s.b0[a], a, j1[a], s.sj[a])
				}
			}
			for k := range f1 {
				if !near(f1[k], s.f[k], s.df) || fx1[k] != s.fx[k] {
					t.Fatalf("subset %d at (%d, %d): f̃[%d] %v / %v, fx %v / %v", subset, ix, iy, k, f1[k], s.f[k], fx1[k], s.fx[k])
				}
			}
			for k := range ch1 {
				// Entry (r, c) on the scale of its row's and column's
				// diagonal entries (those of the second-order terms are
				// ~m² larger).
				r, c := k/12, k%12
				if !near(ch1[k], s.chol[k], math.Max(math.Abs(s.chol[r*13]), math.Abs(s.chol[c*13]))) {
					t.Fatalf("subset %d at (%d, %d): Cholesky factor [%d] %v / %v", subset, ix, iy, k, ch1[k], s.chol[k])
				}
			}
			if !near(df1, s.df, s.df) || !near(mean1, s.fmean, s.fmean) || !near(hu1, s.hUU, s.hUU) || !near(hv1, s.hVV, s.hVV) || !near(ss1, s.sssig, s.sssig) {
				t.Fatalf("subset %d at (%d, %d): ‖f̃‖ %v / %v, f̄ %v / %v, (H⁻¹)uu %v / %v, (H⁻¹)vv %v / %v, Σ∇f² %v / %v",
					subset, ix, iy, df1, s.df, mean1, s.fmean, hu1, s.hUU, hv1, s.hVV, ss1, s.sssig)
			}
		}
		r.stop()
	}
}

// The second-order vector pass gives the sums of pass2t to float rounding
// and reports leaving the usable area exactly when pass2t does, for random
// second-order warps (some reaching past the image edges) and sides that
// are not a multiple of four; a second-order run with it gives the
// portable run's measurement.
func TestVectorPass2MatchesPortable(t *testing.T) {
	if !vectorPass {
		t.Skip("this CPU has no AVX-512 and FMA: the vector pass is not used")
	}
	m := synth.Affine{F: [2][2]float64{{1.006, 0.003}, {-0.002, 0.996}}, CX: 120, CY: 110, U: 2.7, V: -1.4}
	ref, def := pair(t, m, 240, 220, 8, 1, 11)
	rng := rand.New(rand.NewPCG(7, 8))
	for _, tc := range tableCases() {
		var left int
		for _, subset := range []int{21, 25, 31, 33} {
			r, err := newRun(context.Background(), ref, def, Options{Subset: subset, Shape: Second, Threads: 1, Interp: tc.interp}, tuning{table: tc.kind})
			if err != nil {
				t.Fatal(err)
			}
			if err := r.tabulate(context.Background(), 1<<30); err != nil {
				t.Fatal(err)
			}
			s := r.solvers[0]
			if !tc.built(s) {
				t.Fatalf("%s: the run built another table", tc.name)
			}
			for trial := 0; trial < 300; trial++ {
				xc, yc := float64(20+rng.IntN(200)), float64(20+rng.IntN(180))
				if s.prepare(xc, yc) != OK {
					continue
				}
				var p [12]float64
				p[U], p[V] = 24*rng.Float64()-12, 24*rng.Float64()-12
				for _, q := range []int{Ux, Uy, Vx, Vy} {
					p[q] = 0.06*rng.Float64() - 0.03
				}
				for _, q := range []int{Uxx, Uxy, Uyy, Vxx, Vxy, Vyy} {
					p[q] = 0.004*rng.Float64() - 0.002
				}
				var a, b [12]float64
				var ag, agg, afg, bg, bgg, bfg float64
				oka := tc.pass2(s, &p, &ag, &agg, &afg, &a)
				okb := s.pass2v(&p, &bg, &bgg, &bfg, &b)
				if oka != okb {
					t.Fatalf("%s, subset %d at (%v, %v), p %v: portable pass reports %v, vector pass %v", tc.name, subset, xc, yc, p, oka, okb)
				}
				if !oka {
					left++
					continue
				}
				// As in TestVectorPassMatchesPortable: each term differs by
				// about 1e-7·|g| times its weight.
				n := float64(s.n)
				delta := 1e-6 * (math.Abs(s.fmean) + 6*math.Sqrt(agg/n))
				side := 2*s.m + 1
				var wf, wj [12]float64
				var jv [12]float64
				for k := range s.f {
					xi, eta := float64(k%side-s.m), float64(k/side-s.m)
					s.jacobian(s.fx[k], s.fy[k], xi, eta, &jv)
					for q := range jv {
						wj[q] += math.Abs(jv[q])
					}
					wf[0] += math.Abs(s.f[k])
				}
				for _, d := range []struct {
					name string
					x, y float64
					w    float64
				}{{"Σg", ag, bg, n}, {"Σg²", agg, bgg, 12 * math.Sqrt(agg*n)}, {"Σf̃g", afg, bfg, wf[0]}} {
					if math.Abs(d.x-d.y) > delta*d.w {
						t.Fatalf("%s, subset %d trial %d: %s portable %v, vector %v", tc.name, subset, trial, d.name, d.x, d.y)
					}
				}
				for q := 0; q < 12; q++ {
					if math.Abs(a[q]-b[q]) > delta*wj[q] {
						t.Fatalf("%s, subset %d trial %d: ΣJg[%d] portable %v, vector %v, differ by more than %.2g", tc.name, subset, trial, q, a[q], b[q], delta*wj[q])
					}
				}
			}
			r.stop()
		}
		t.Logf("%s: %d warps left the usable area in both passes", tc.name, left)
		if left == 0 {
			t.Errorf("%s: no warp left the usable area: the edge case is not tested", tc.name)
		}
		opt := Options{Subset: 25, Step: 6, Shape: Second, Interp: tc.interp}
		v, err := runWith(context.Background(), ref, def, opt, tuning{table: tc.kind})
		if err != nil {
			t.Fatal(err)
		}
		pt, err := runWith(context.Background(), ref, def, opt, tuning{table: tc.kind, portable: true})
		if err != nil {
			t.Fatal(err)
		}
		var worst float64
		for i, p := range v.Points {
			q := pt.Points[i]
			if p.Status != q.Status {
				t.Fatalf("point %d: status %v with the vector pass, %v with the portable one", i, p.Status, q.Status)
			}
			if p.Status == OK {
				worst = math.Max(worst, math.Hypot(p.P[U]-q.P[U], p.P[V]-q.P[V]))
			}
		}
		t.Logf("%s: %d points, largest displacement difference %.2g px", tc.name, v.Stats.OK, worst)
		if v.Stats.OK < v.Stats.Total/2 || worst > 5e-6 {
			t.Errorf("%s: %d of %d points, vector and portable passes differ by up to %.2g px, want ≤ 5e-6", tc.name, v.Stats.OK, v.Stats.Total, worst)
		}
	}
}

// The row-table interpolations of the vector passes give the values of
// spline.EvalRows and spline.EvalRows5 (the same rows combined in the same
// basis, in another order, float32) at every pixel of a subset row, for
// first-order steps and steps that grow along the row (second order),
// sides that are and are not a multiple of four, and rows whose groups
// fall on neighbouring cells of one table row (one load per row
// polynomial) and groups that do not.
func TestVectorRowsMatchEvalRows(t *testing.T) {
	if !vectorPass {
		t.Skip("this CPU has no AVX-512 and FMA: the vector pass is not used")
	}
	m := synth.Affine{F: [2][2]float64{{1.006, 0.003}, {-0.002, 0.996}}, CX: 120, CY: 110, U: 2.7, V: -1.4}
	ref, def := pair(t, m, 240, 220, 8, 1, 11)
	const eps = 0x1p-24 // float32's unit roundoff
	for _, tc := range []struct {
		name   string
		interp spline.Order
		// use gives the solver its table and returns the sampler and the
		// reference value at a fixed-point position with the bound on
		// their difference there.
		use func(t *testing.T, s *solver, sp *spline.Image) (sample func(x, y, xL, yL int64), eval func(x, y int64) (v, bound float64))
		// near reports whether a group's pixels from i on take the
		// single loads.
		near func(cx, cy []int64, i int) bool
	}{
		{"row table", spline.Cubic,
			func(t *testing.T, s *solver, sp *spline.Image) (func(x, y, xL, yL int64), func(x, y int64) (float64, float64)) {
				rt, err := spline.NewRowTable(context.Background(), sp, 1)
				if err != nil {
					t.Fatal(err)
				}
				s.useRowTable(rt)
				a, w := rt.Coefficients(), rt.W
				// float32 evaluations of a cubic in each direction: some 20
				// roundings of terms up to a few times the grey level (the
				// bound of the first version of this test, 2e-6 of the
				// largest value, here per sample: 2e-6 of 255).
				return s.sampleRows, func(x, y int64) (float64, float64) {
					o := 4 * (int(y>>fixBits)*w + int(x>>fixBits))
					tx, ty := float32(x&fixMask)*fixScale, float32(y&fixMask)*fixScale
					return float64(spline.EvalRows(a, o, 4*w, tx, ty)), 2e-6 * 255
				}
			},
			func(cx, cy []int64, i int) bool {
				return cy[i] == cy[i+3] && cx[i+1]-cx[i] == 1 && cx[i+2]-cx[i] == 2 && cx[i+3]-cx[i] == 3
			}},
		{"quintic row table", spline.Quintic,
			func(t *testing.T, s *solver, sp *spline.Image) (func(x, y, xL, yL int64), func(x, y int64) (float64, float64)) {
				qt, err := spline.NewQuinticRowTable(context.Background(), sp, 1)
				if err != nil {
					t.Fatal(err)
				}
				s.useQuinticRowTable(qt)
				a, w := qt.Coefficients(), qt.W
				// Both evaluate six row polynomials (5 roundings each) and
				// combine them with weights of at most 166 (the sum of
				// |coefficients| of a row's basis polynomial, quinticBasis5),
				// a dozen roundings deep: each differs from the exact value
				// by at most about 12·eps times Σ_q B_q·Σ_i |c_qi|, the
				// magnitude of its terms; the bound is twice that.
				return s.sampleRows5, func(x, y int64) (float64, float64) {
					o := 6 * (int(y>>fixBits)*w + int(x>>fixBits))
					tx, ty := float32(x&fixMask)*fixScale, float32(y&fixMask)*fixScale
					var mag float64
					for q, b := range quinticBasis5 {
						var bq, cq float64
						for i := range 6 {
							bq += math.Abs(float64(b[i]))
							cq += math.Abs(float64(a[o+q*6*w+i]))
						}
						mag += bq * cq
					}
					return float64(spline.EvalRows5(a, o, 6*w, tx, ty)), 24 * eps * mag
				}
			},
			func(cx, cy []int64, i int) bool {
				return cy[i] == cy[i+1] && cy[i+2] == cy[i+3] && cx[i+1]-cx[i] == 1 && cx[i+3]-cx[i+2] == 1
			}},
	} {
		rng := rand.New(rand.NewPCG(9, 10))
		for _, subset := range []int{21, 31, 33} {
			r, err := newRun(context.Background(), ref, def, Options{Subset: subset, Threads: 1, Interp: tc.interp}, tuning{})
			if err != nil {
				t.Fatal(err)
			}
			s := r.solvers[0]
			sample, eval := tc.use(t, s, r.defSp)
			n := 2*s.m + 1
			last := int64(n - 4)
			var worst, worstRel, scale float64
			var near, far int
			for trial := 0; trial < 400; trial++ {
				// First differences along the row near 1 (the usual case) or
				// far from it, and for second-order rows a growth of up to
				// ±2e-3 px per pixel; every position inside the usable area
				// of the quintic table (3 px from the edges).
				a11, a21 := 1+0.02*rng.Float64()-0.01, 0.02*rng.Float64()-0.01
				if trial%4 == 1 {
					a11, a21 = 1+0.6*rng.Float64()-0.3, 0.6*rng.Float64()-0.3
				}
				var ddx, ddy int64
				if trial%2 == 1 {
					ddx, ddy = int64((0.004*rng.Float64()-0.002)*fixOne), int64((0.004*rng.Float64()-0.002)*fixOne)
				}
				dx0, dy0 := int64(a11*fixOne), int64(a21*fixOne)
				x0, y0 := fix(30+150*rng.Float64()), fix(30+150*rng.Float64())
				// Positions, the lane offsets and steps of sampleRow's s.rv.
				px, py := make([]int64, n), make([]int64, n)
				cx, cy := make([]int64, n), make([]int64, n)
				for i := range px {
					t := int64(i) * int64(i-1) / 2
					px[i], py[i] = x0+int64(i)*dx0+t*ddx, y0+int64(i)*dy0+t*ddy
					cx[i], cy[i] = px[i]>>fixBits, py[i]>>fixBits
				}
				rv := &s.rv
				for l := range 4 {
					rv[0][l], rv[0][4+l] = px[l]-px[0], py[l]-py[0]
					rv[1][l], rv[1][4+l] = px[int(last)+l]-px[last], py[int(last)+l]-py[last]
					rv[2][l], rv[2][4+l] = px[4+l]-px[l], py[4+l]-py[l]
					rv[3][l], rv[3][4+l] = 16*ddx, 16*ddy
				}
				sample(px[0], py[0], px[last], py[last])
				archsimd.ClearAVXUpperBits()
				for i := range px {
					want, bound := eval(px[i], py[i])
					d := math.Abs(s.gbuf[i] - want)
					worst, worstRel = math.Max(worst, d), math.Max(worstRel, d/bound)
					scale = math.Max(scale, math.Abs(want))
				}
				for i := 0; i+4 <= n; i += 4 {
					if tc.near(cx, cy, i) {
						near++
					} else {
						far++
					}
				}
			}
			r.stop()
			t.Logf("%s, subset %d: worst difference %.2g (%.2g of its bound), largest value %.3g; groups on neighbouring cells %d, others %d",
				tc.name, subset, worst, worstRel, scale, near, far)
			if worstRel > 1 {
				t.Errorf("%s, subset %d: the vector interpolation and the reference differ by up to %.2g of the bound", tc.name, subset, worstRel)
			}
			if near == 0 || far == 0 {
				t.Errorf("%s, subset %d: %d groups on neighbouring cells, %d others: both kinds must be tested", tc.name, subset, near, far)
			}
		}
	}
}

package correlate

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/mottledic/mottle/pkg/synth"
)

// prepBench returns a first- or second-order solver on a 240×220 pair and
// 48 grid points (step 8, subset 31) for the prepare benchmarks.
func prepBench(b *testing.B, shape Shape) (*solver, [][2]int) {
	m := synth.Affine{F: [2][2]float64{{1.006, 0.003}, {-0.002, 0.996}}, CX: 120, CY: 110, U: 2.7, V: -1.4}
	ref, def := pair(b, m, 240, 220, 8, 1, 11)
	r, err := newRun(context.Background(), ref, def, Options{Subset: 31, Shape: shape, Threads: 1}, tuning{})
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(r.stop)
	var pts [][2]int
	for y := 40; y < 40+6*8; y += 8 {
		for x := 40; x < 40+8*8; x += 8 {
			pts = append(pts, [2]int{x, y})
		}
	}
	return r.solvers[0], pts
}

// BenchmarkPrepare1 times the portable first-order grid-point prepare
// alone, per subset, on data in the cache.
func BenchmarkPrepare1(b *testing.B) {
	s, pts := prepBench(b, First)
	for b.Loop() {
		for _, p := range pts {
			if s.prepare1(p[0], p[1]) != OK {
				b.Fatal("prepare1 failed")
			}
		}
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*len(pts)), "ns/subset")
}

// BenchmarkPrepare2 is BenchmarkPrepare1 for the second-order prepare.
func BenchmarkPrepare2(b *testing.B) {
	s, pts := prepBench(b, Second)
	for b.Loop() {
		for _, p := range pts {
			if s.prepare2(p[0], p[1]) != OK {
				b.Fatal("prepare2 failed")
			}
		}
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*len(pts)), "ns/subset")
}

// The fused grid-point prepares of the portable build (prepare1 and
// prepare2: one pass for the copy, Σ f and the Hessian's running sums,
// one for the centring, ‖f − f̄‖, Σ J f̃ and Σ J) give the reference data
// of the general path (prepareAny: copy, centre, then hessian1 or
// hessian2m, which TestHessian1MatchesExplicit and
// TestHessian2MomentsMatchExplicit check against the explicit Σ JᵀJ of
// Baker & Matthews 2004, IJCV 56(3):221) to rounding, for both warps, for
// sides 21, 25, 31 and 33 at random grid points.
func TestPreparesMatchGeneral(t *testing.T) {
	m := synth.Affine{F: [2][2]float64{{1.006, 0.003}, {-0.002, 0.996}}, CX: 120, CY: 110, U: 2.7, V: -1.4}
	ref, def := pair(t, m, 240, 220, 8, 1, 11)
	rng := rand.New(rand.NewPCG(7, 8))
	near := func(a, b, scale float64) bool { return math.Abs(a-b) <= 1e-12*scale }
	for _, shape := range []Shape{First, Second} {
		for _, subset := range []int{21, 25, 31, 33} {
			r, err := newRun(context.Background(), ref, def, Options{Subset: subset, Shape: shape, Threads: 1}, tuning{})
			if err != nil {
				t.Fatal(err)
			}
			s := r.solvers[0]
			for trial := 0; trial < 20; trial++ {
				ix, iy := 20+rng.IntN(200), 20+rng.IntN(180)
				var st1 Status
				if shape == First {
					st1 = s.prepare1(ix, iy)
				} else {
					st1 = s.prepare2(ix, iy)
				}
				f1 := append([]float64(nil), s.f...)
				fx1, fy1 := append([]float64(nil), s.fx...), append([]float64(nil), s.fy...)
				b1, j1, df1, mean1, hu1, hv1, ss1, ch1 := s.b0, s.sj, s.df, s.fmean, s.hUU, s.hVV, s.sssig, s.chol
				s.xc, s.yc = float64(ix), float64(iy)
				st2 := s.prepareAny(true)
				if st1 != st2 {
					t.Fatalf("shape %v subset %d at (%d, %d): fused %v, general %v", shape, subset, ix, iy, st1, st2)
				}
				if st1 != OK {
					continue
				}
				var bmax, jmax float64
				for a := 0; a < s.np; a++ {
					bmax, jmax = math.Max(bmax, math.Abs(s.b0[a])), math.Max(jmax, math.Abs(s.sj[a]))
				}
				for a := 0; a < 12; a++ {
					if !near(b1[a], s.b0[a], bmax) || !near(j1[a], s.sj[a], jmax) {
						t.Fatalf("shape %v subset %d at (%d, %d): Σ J f̃[%d] %v / %v, Σ J[%d] %v / %v", shape, subset, ix, iy, a, b1[a], s.b0[a], a, j1[a], s.sj[a])
					}
				}
				for k := range f1 {
					if !near(f1[k], s.f[k], s.df) || fx1[k] != s.fx[k] || fy1[k] != s.fy[k] {
						t.Fatalf("shape %v subset %d at (%d, %d): f̃[%d] %v / %v, fx %v / %v, fy %v / %v", shape, subset, ix, iy, k, f1[k], s.f[k], fx1[k], s.fx[k], fy1[k], s.fy[k])
					}
				}
				for k := range ch1 {
					if !near(ch1[k], s.chol[k], math.Abs(s.chol[0])) {
						t.Fatalf("shape %v subset %d at (%d, %d): Cholesky factor [%d] %v / %v", shape, subset, ix, iy, k, ch1[k], s.chol[k])
					}
				}
				if !near(df1, s.df, s.df) || !near(mean1, s.fmean, s.fmean) || !near(hu1, s.hUU, s.hUU) || !near(hv1, s.hVV, s.hVV) || !near(ss1, s.sssig, s.sssig) {
					t.Fatalf("shape %v subset %d at (%d, %d): ‖f̃‖ %v / %v, f̄ %v / %v, (H⁻¹)uu %v / %v, (H⁻¹)vv %v / %v, Σ∇f² %v / %v",
						shape, subset, ix, iy, df1, s.df, mean1, s.fmean, hu1, s.hUU, hv1, s.hVV, ss1, s.sssig)
				}
			}
			r.stop()
		}
	}
}

// The second-order grid-point prepare from the moment table (prepare2m,
// the row sums shared by the subsets of one grid column) gives prepare2's
// reference data to rounding at every grid point, the table does not
// depend on the number of threads, and points off the grid have no entry.
func TestMomentTableMatchesPrepare2(t *testing.T) {
	m := synth.Affine{F: [2][2]float64{{1.006, 0.003}, {-0.002, 0.996}}, CX: 120, CY: 110, U: 2.7, V: -1.4}
	ref, def := pair(t, m, 240, 220, 8, 1, 11)
	near := func(a, b, scale float64) bool { return math.Abs(a-b) <= 1e-12*scale }
	for _, c := range []struct{ subset, step, threads int }{{31, 8, 1}, {21, 6, 2}, {33, 7, 3}} {
		r, err := newRun(context.Background(), ref, def, Options{Subset: c.subset, Step: c.step, Shape: Second, Threads: c.threads}, tuning{portable: true})
		if err != nil {
			t.Fatal(err)
		}
		if err := r.setupGrid(); err != nil {
			t.Fatal(err)
		}
		if err := r.gridMoments(context.Background()); err != nil {
			t.Fatal(err)
		}
		s := r.solvers[0]
		tab := s.mom
		if tab == nil {
			t.Fatalf("subset %d step %d: no moment table", c.subset, c.step)
		}
		// The same table computed on one thread, bit for bit.
		r.threads = 1
		if err := r.gridMoments(context.Background()); err != nil {
			t.Fatal(err)
		}
		for k := range tab.p2 {
			if tab.p2[k] != s.mom.p2[k] {
				t.Fatalf("subset %d step %d: point %d: moments differ between %d threads and one", c.subset, c.step, k, c.threads)
			}
		}
		g := r.grid
		if s.mom.at(g.X0+1, g.Y0) != nil || s.mom.at(g.X0, g.Y0-g.Step) != nil || s.mom.at(g.X0+g.Nx*g.Step, g.Y0) != nil {
			t.Fatalf("subset %d step %d: an entry off the grid", c.subset, c.step)
		}
		checked := 0
		for k := range r.pts {
			if r.state[k] != stPending {
				continue
			}
			x, y := g.At(k%g.Nx, k/g.Nx)
			p := s.mom.at(x, y)
			if p == nil {
				t.Fatalf("subset %d step %d: no entry at (%d, %d)", c.subset, c.step, x, y)
			}
			st1 := s.prepare2m(x, y, p)
			f1 := append([]float64(nil), s.f...)
			fx1, fy1 := append([]float64(nil), s.fx...), append([]float64(nil), s.fy...)
			b1, j1, df1, mean1, hu1, hv1, ss1, ch1 := s.b0, s.sj, s.df, s.fmean, s.hUU, s.hVV, s.sssig, s.chol
			st2 := s.prepare2(x, y)
			if st1 != st2 {
				t.Fatalf("subset %d at (%d, %d): table %v, prepare2 %v", c.subset, x, y, st1, st2)
			}
			if st1 != OK {
				continue
			}
			checked++
			var bmax, jmax float64
			for a := 0; a < 12; a++ {
				bmax, jmax = math.Max(bmax, math.Abs(s.b0[a])), math.Max(jmax, math.Abs(s.sj[a]))
			}
			for a := 0; a < 12; a++ {
				if !near(b1[a], s.b0[a], bmax) || !near(j1[a], s.sj[a], jmax) {
					t.Fatalf("subset %d at (%d, %d): Σ J f̃[%d] %v / %v, Σ J[%d] %v / %v", c.subset, x, y, a, b1[a], s.b0[a], a, j1[a], s.sj[a])
				}
			}
			for k := range f1 {
				if !near(f1[k], s.f[k], s.df) || fx1[k] != s.fx[k] || fy1[k] != s.fy[k] {
					t.Fatalf("subset %d at (%d, %d): f̃[%d] %v / %v", c.subset, x, y, k, f1[k], s.f[k])
				}
			}
			// The factor's entries span many orders of magnitude (the
			// moments of ξ⁴ and η⁴ against those of 1): each is compared
			// at the scale of its row's and column's diagonal entries.
			for k := range ch1 {
				row, col := k/12, k%12
				sc := math.Max(math.Abs(s.chol[row*13]), math.Abs(s.chol[col*13]))
				if !near(ch1[k], s.chol[k], sc) {
					t.Fatalf("subset %d at (%d, %d): Cholesky factor [%d] %v / %v", c.subset, x, y, k, ch1[k], s.chol[k])
				}
			}
			if !near(df1, s.df, s.df) || !near(mean1, s.fmean, s.fmean) || !near(hu1, s.hUU, s.hUU) || !near(hv1, s.hVV, s.hVV) || !near(ss1, s.sssig, s.sssig) {
				t.Fatalf("subset %d at (%d, %d): ‖f̃‖ %v / %v, f̄ %v / %v, (H⁻¹)uu %v / %v, (H⁻¹)vv %v / %v, Σ∇f² %v / %v",
					c.subset, x, y, df1, s.df, mean1, s.fmean, hu1, s.hUU, hv1, s.hVV, ss1, s.sssig)
			}
		}
		if checked < g.Len()/2 {
			t.Errorf("subset %d step %d: %d of %d grid points checked", c.subset, c.step, checked, g.Len())
		}
		r.stop()
	}
}

// The first-order grid-point prepare from the moment table (prepare1m,
// the row sums shared by the subsets of one grid column) gives prepare1's reference
// data to rounding at every grid point, the table's sums do not depend on
// the number of threads, and points off the grid have no entry.
func TestMomentTableMatchesPrepare1(t *testing.T) {
	m := synth.Affine{F: [2][2]float64{{1.006, 0.003}, {-0.002, 0.996}}, CX: 120, CY: 110, U: 2.7, V: -1.4}
	ref, def := pair(t, m, 240, 220, 8, 1, 11)
	near := func(a, b, scale float64) bool { return math.Abs(a-b) <= 1e-12*scale }
	for _, c := range []struct{ subset, step, threads int }{{31, 8, 1}, {21, 5, 2}, {33, 7, 3}} {
		r, err := newRun(context.Background(), ref, def, Options{Subset: c.subset, Step: c.step, Threads: c.threads}, tuning{portable: true})
		if err != nil {
			t.Fatal(err)
		}
		if err := r.setupGrid(); err != nil {
			t.Fatal(err)
		}
		if err := r.gridMoments(context.Background()); err != nil {
			t.Fatal(err)
		}
		s := r.solvers[0]
		tab := s.mom
		if tab == nil {
			t.Fatalf("subset %d step %d: no moment table", c.subset, c.step)
		}
		// The same table computed on one thread, bit for bit.
		r.threads = 1
		if err := r.gridMoments(context.Background()); err != nil {
			t.Fatal(err)
		}
		for k := range tab.p1 {
			if tab.p1[k] != s.mom.p1[k] {
				t.Fatalf("subset %d step %d: point %d: moments differ between %d threads and one", c.subset, c.step, k, c.threads)
			}
		}
		g := r.grid
		if s.mom.at1(g.X0+1, g.Y0) != nil || s.mom.at1(g.X0, g.Y0-g.Step) != nil || s.mom.at1(g.X0+g.Nx*g.Step, g.Y0) != nil || s.mom.at(g.X0, g.Y0) != nil {
			t.Fatalf("subset %d step %d: an entry off the grid", c.subset, c.step)
		}
		checked := 0
		for k := range r.pts {
			if r.state[k] != stPending {
				continue
			}
			x, y := g.At(k%g.Nx, k/g.Nx)
			p := s.mom.at1(x, y)
			if p == nil {
				t.Fatalf("subset %d step %d: no entry at (%d, %d)", c.subset, c.step, x, y)
			}
			st1 := s.prepare1m(x, y, p)
			f1 := append([]float64(nil), s.f...)
			fx1, fy1 := append([]float64(nil), s.fx...), append([]float64(nil), s.fy...)
			b1, j1, df1, mean1, hu1, hv1, ss1, ch1 := s.b0, s.sj, s.df, s.fmean, s.hUU, s.hVV, s.sssig, s.chol
			st2 := s.prepare1(x, y)
			if st1 != st2 {
				t.Fatalf("subset %d at (%d, %d): table %v, prepare1 %v", c.subset, x, y, st1, st2)
			}
			if st1 != OK {
				continue
			}
			checked++
			var bmax, jmax float64
			for a := 0; a < 6; a++ {
				bmax, jmax = math.Max(bmax, math.Abs(s.b0[a])), math.Max(jmax, math.Abs(s.sj[a]))
			}
			for a := 0; a < 12; a++ {
				if !near(b1[a], s.b0[a], bmax) || !near(j1[a], s.sj[a], jmax) {
					t.Fatalf("subset %d at (%d, %d): Σ J f̃[%d] %v / %v, Σ J[%d] %v / %v", c.subset, x, y, a, b1[a], s.b0[a], a, j1[a], s.sj[a])
				}
			}
			for k := range f1 {
				if !near(f1[k], s.f[k], s.df) || fx1[k] != s.fx[k] || fy1[k] != s.fy[k] {
					t.Fatalf("subset %d at (%d, %d): f̃[%d] %v / %v", c.subset, x, y, k, f1[k], s.f[k])
				}
			}
			for k := range ch1 {
				if !near(ch1[k], s.chol[k], math.Abs(s.chol[0])) {
					t.Fatalf("subset %d at (%d, %d): Cholesky factor [%d] %v / %v", c.subset, x, y, k, ch1[k], s.chol[k])
				}
			}
			if !near(df1, s.df, s.df) || !near(mean1, s.fmean, s.fmean) || !near(hu1, s.hUU, s.hUU) || !near(hv1, s.hVV, s.hVV) || !near(ss1, s.sssig, s.sssig) {
				t.Fatalf("subset %d at (%d, %d): ‖f̃‖ %v / %v, f̄ %v / %v, (H⁻¹)uu %v / %v, (H⁻¹)vv %v / %v, Σ∇f² %v / %v",
					c.subset, x, y, df1, s.df, mean1, s.fmean, hu1, s.hUU, hv1, s.hVV, ss1, s.sssig)
			}
		}
		if checked < g.Len()/2 {
			t.Errorf("subset %d step %d: %d of %d grid points checked", c.subset, c.step, checked, g.Len())
		}
		r.stop()
	}
}

package kinematics

import (
	"context"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// field fills u, v on g from functions of the reference coordinates.
func fillField(g Grid, fu, fv func(x, y float64) float64) (u, v []float64) {
	u, v = make([]float64, g.Len()), make([]float64, g.Len())
	for j := range g.Ny {
		for i := range g.Nx {
			x, y := g.At(i, j)
			u[j*g.Nx+i], v[j*g.Nx+i] = fu(x, y), fv(x, y)
		}
	}
	return u, v
}

// A least-squares fit reproduces any field that lies in its model space
// exactly (property of least squares; Pan, Asundi, Xie & Gao 2009, Opt.
// Lasers Eng. 47:865): linear fields for the plane fit, quadratic fields for
// the quadratic fit, also at edges and beside holes.
func TestGradientsExact(t *testing.T) {
	g := Grid{X0: 20, Y0: 16, Step: 7, Nx: 17, Ny: 13}
	lin := [2]func(x, y float64) float64{
		func(x, y float64) float64 { return 1.5 + 0.012*x - 0.004*y },
		func(x, y float64) float64 { return -2 + 0.003*x + 0.021*y },
	}
	// Gradient of lin at any point.
	linGrad := func(x, y float64) [4]float64 { return [4]float64{0.012, -0.004, 0.003, 0.021} }
	quad := [2]func(x, y float64) float64{
		func(x, y float64) float64 { return 0.5 + 0.01*x + 2e-4*x*x - 3e-4*x*y + 1e-4*y*y },
		func(x, y float64) float64 { return -0.3*y/100 + 1e-4*x*x + 5e-5*x*y - 2e-4*y*y },
	}
	quadGrad := func(x, y float64) [4]float64 {
		return [4]float64{0.01 + 4e-4*x - 3e-4*y, -3e-4*x + 2e-4*y, 2e-4*x + 5e-5*y, -0.003 + 5e-5*x - 4e-4*y}
	}
	cases := []struct {
		name   string
		fit    Fit
		window int
		f      [2]func(x, y float64) float64
		grad   func(x, y float64) [4]float64
		tol    float64
	}{
		{"plane/linear/w3", Plane, 3, lin, linGrad, 1e-13},
		{"plane/linear/w7", Plane, 7, lin, linGrad, 1e-13},
		{"quadratic/linear/w5", Quadratic, 5, lin, linGrad, 1e-12},
		{"quadratic/quadratic/w5", Quadratic, 5, quad, quadGrad, 1e-12},
		{"quadratic/quadratic/w9", Quadratic, 9, quad, quadGrad, 1e-12},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			u, v := fillField(g, c.f[0], c.f[1])
			// Punch a hole and a few scattered invalid points.
			for _, p := range []int{5*g.Nx + 6, 5*g.Nx + 7, 6*g.Nx + 6, 6*g.Nx + 7, 2*g.Nx + 13} {
				u[p] = math.NaN()
			}
			v[9*g.Nx+2] = math.Inf(1)
			res, err := Gradients(context.Background(), g, u, v, nil, nil, GradientOptions{Window: c.window, Fit: c.fit})
			if err != nil {
				t.Fatal(err)
			}
			nOK := 0
			for j := range g.Ny {
				for i := range g.Nx {
					p := j*g.Nx + i
					r := res[p]
					if !valid(u, v, p) {
						if r.Status != GradInvalidPoint || !math.IsNaN(r.Ux) {
							t.Errorf("(%d,%d): invalid point got status %v, Ux %v", i, j, r.Status, r.Ux)
						}
						continue
					}
					if r.Status != GradOK {
						continue
					}
					nOK++
					x, y := g.At(i, j)
					want := c.grad(x, y)
					got := [4]float64{r.Ux, r.Uy, r.Vx, r.Vy}
					for k := range 4 {
						if !near(got[k], want[k], c.tol) {
							t.Errorf("(%d,%d) N=%d: gradient[%d] = %.15g, want %.15g", i, j, r.N, k, got[k], want[k])
						}
					}
					if !near(r.U, c.f[0](x, y), 1e-11) || !near(r.V, c.f[1](x, y), 1e-11) {
						t.Errorf("(%d,%d): fitted u, v = %v, %v, want %v, %v", i, j, r.U, r.V, c.f[0](x, y), c.f[1](x, y))
					}
				}
			}
			if nOK < g.Len()*3/4 {
				t.Errorf("only %d of %d points fitted", nOK, g.Len())
			}
		})
	}
}

// Neighbour counts at a corner, an edge and beside a hole, counted by hand
// on the 5×5 window (3×3 = 9 at a corner, 3×5 = 15 on an edge, 25 − 1 next
// to the one invalid point).
func TestGradientsCounts(t *testing.T) {
	g := Grid{Step: 5, Nx: 10, Ny: 10}
	u, v := fillField(g, func(x, y float64) float64 { return 0.01 * x }, func(x, y float64) float64 { return 0 })
	u[5*10+5] = math.NaN()
	res, err := Gradients(context.Background(), g, u, v, nil, nil, GradientOptions{Window: 5})
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct{ i, j, n int }{{0, 0, 9}, {4, 0, 15}, {2, 2, 25}, {4, 4, 24}, {9, 9, 9}} {
		if got := res[c.j*10+c.i].N; got != c.n {
			t.Errorf("(%d,%d): N = %d, want %d", c.i, c.j, got, c.n)
		}
	}
	// An isolated valid point has too few neighbours.
	for p := range u {
		if p != 33 {
			u[p] = math.NaN()
		}
	}
	res, _ = Gradients(context.Background(), g, u, v, nil, nil, GradientOptions{})
	if res[33].Status != GradTooFewNeighbours || res[33].N != 1 || !math.IsNaN(res[33].Ux) {
		t.Errorf("isolated point: %+v", res[33])
	}
	if res[33].Status.String() != "too_few_neighbours" {
		t.Errorf("status string %q", res[33].Status)
	}
}

// Enough points, but all on one line: the plane is not determined.
func TestGradientsDegenerate(t *testing.T) {
	g := Grid{Step: 4, Nx: 20, Ny: 1}
	u, v := fillField(g, func(x, y float64) float64 { return 0.01 * x }, func(x, y float64) float64 { return 0 })
	res, err := Gradients(context.Background(), g, u, v, nil, nil, GradientOptions{Window: 9})
	if err != nil {
		t.Fatal(err)
	}
	if res[10].Status != GradDegenerate || res[10].N != 9 {
		t.Errorf("collinear window: status %v N %d, want degenerate_window with 9 points", res[10].Status, res[10].N)
	}
}

// The fit agrees with gonum's least-squares solve (QR, mat.Dense.Solve) on
// noisy data with holes (gonum.org/v1/gonum/mat as reference).
func TestGradientsAgainstGonum(t *testing.T) {
	r := rand.New(rand.NewPCG(3, 4))
	g := Grid{X0: 10, Y0: 10, Step: 6, Nx: 12, Ny: 9}
	u, v := make([]float64, g.Len()), make([]float64, g.Len())
	for p := range u {
		u[p], v[p] = r.NormFloat64(), r.NormFloat64()
		if r.Float64() < 0.15 {
			v[p] = math.NaN()
		}
	}
	for _, fit := range []Fit{Plane, Quadratic} {
		res, err := Gradients(context.Background(), g, u, v, nil, nil, GradientOptions{Window: 5, Fit: fit})
		if err != nil {
			t.Fatal(err)
		}
		checked := 0
		for j := range g.Ny {
			for i := range g.Nx {
				rp := res[j*g.Nx+i]
				if rp.Status != GradOK {
					continue
				}
				var rows, bu, bv []float64
				for jj := j - 2; jj <= j+2; jj++ {
					for ii := i - 2; ii <= i+2; ii++ {
						if ii < 0 || jj < 0 || ii >= g.Nx || jj >= g.Ny || !valid(u, v, jj*g.Nx+ii) {
							continue
						}
						dx, dy := float64(ii-i)*g.Step, float64(jj-j)*g.Step
						row := []float64{1, dx, dy, dx * dx, dx * dy, dy * dy}
						rows = append(rows, row[:fit.terms()]...)
						bu = append(bu, u[jj*g.Nx+ii])
						bv = append(bv, v[jj*g.Nx+ii])
					}
				}
				A := mat.NewDense(len(bu), fit.terms(), rows)
				var xu, xv mat.Dense
				if err := xu.Solve(A, mat.NewVecDense(len(bu), bu)); err != nil {
					t.Fatal(err)
				}
				if err := xv.Solve(A, mat.NewVecDense(len(bv), bv)); err != nil {
					t.Fatal(err)
				}
				want := [4]float64{xu.At(1, 0), xu.At(2, 0), xv.At(1, 0), xv.At(2, 0)}
				got := [4]float64{rp.Ux, rp.Uy, rp.Vx, rp.Vy}
				for k := range 4 {
					if !near(got[k], want[k], 1e-10) {
						t.Errorf("%v (%d,%d): gradient[%d] %v, gonum %v", fit, i, j, k, got[k], want[k])
					}
				}
				if rp.N != len(bu) {
					t.Errorf("%v (%d,%d): N = %d, want %d", fit, i, j, rp.N, len(bu))
				}
				checked++
			}
		}
		if checked < 50 {
			t.Errorf("%v: only %d points checked", fit, checked)
		}
	}
}

// Adding a rigid translation to u leaves F and every strain unchanged
// (common practice).
func TestTranslationInvariance(t *testing.T) {
	g := Grid{X0: 8, Y0: 8, Step: 8, Nx: 9, Ny: 7}
	r := rand.New(rand.NewPCG(5, 6))
	u, v := make([]float64, g.Len()), make([]float64, g.Len())
	for p := range u {
		u[p], v[p] = 0.1*r.NormFloat64(), 0.1*r.NormFloat64()
	}
	u2, v2 := make([]float64, g.Len()), make([]float64, g.Len())
	for p := range u {
		u2[p], v2[p] = u[p]+13.25, v[p]-7.5
	}
	for _, fit := range []Fit{Plane, Quadratic} {
		a, _ := Gradients(context.Background(), g, u, v, nil, nil, GradientOptions{Fit: fit})
		b, _ := Gradients(context.Background(), g, u2, v2, nil, nil, GradientOptions{Fit: fit})
		qa, _ := Quantities(a, HenckyMeasure)
		qb, _ := Quantities(b, HenckyMeasure)
		for name, va := range qa {
			for p := range va {
				// Adding 13.25 px rounds u to its ulp (≈ 2e-15 px), which
				// the principal angle amplifies where E_max ≈ E_min.
				tol := 1e-12
				if name == "E_max_angle_deg" {
					tol = 1e-8
				}
				if !(math.IsNaN(va[p]) && math.IsNaN(qb[name][p])) && !near(va[p], qb[name][p], tol) {
					t.Errorf("%v: %s[%d] = %v without and %v with translation", fit, name, p, va[p], qb[name][p])
				}
			}
		}
	}
}

// The propagated std of the fitted gradient and of E11, E12 matches a Monte
// Carlo estimate (first-order propagation is exact for the linear fit; for
// E the linearisation error is negligible at this noise level). The sample
// std of 4000 trials has a relative standard error of about 1/√8000 ≈ 1.1 %,
// so a 5 % tolerance leaves room for > 4 standard errors.
func TestGradientStdMonteCarlo(t *testing.T) {
	g, u0, v0, su, sv, probes := stdCase(Grid{Step: 5, Nx: 7, Ny: 7})
	for _, fit := range []Fit{Plane, Quadratic} {
		opt := GradientOptions{Window: 5, Fit: fit, Threads: 1}
		pred, err := Gradients(context.Background(), g, u0, v0, su, sv, opt)
		if err != nil {
			t.Fatal(err)
		}
		r := rand.New(rand.NewPCG(7, uint64(fit)))
		sd := monteCarloStd(g, u0, v0, probes, opt, func(du, dv []float64) {
			for p := range du {
				du[p] = su[p] * r.NormFloat64()
				dv[p] = sv[p] * r.NormFloat64()
			}
		})
		for k, p := range probes {
			if pred[p].Status != GradOK {
				t.Fatalf("%v probe %d: status %v", fit, p, pred[p].Status)
			}
			want := propagatedStd(pred[p])
			for c := range want {
				if math.Abs(sd[k][c]/want[c]-1) > 0.05 {
					t.Errorf("%v point %d std %s: propagated %.4g, Monte Carlo %.4g", fit, p, stdName(c), want[c], sd[k][c])
				}
			}
		}
	}
}

// stdCase is the field of the Monte Carlo tests on g (7×7): an affine
// displacement with a hole in one window, per-point stds that vary, and
// three probe points (inside, near a corner, at an edge).
func stdCase(g Grid) (Grid, []float64, []float64, []float64, []float64, []int) {
	u0, v0 := fillField(g,
		func(x, y float64) float64 { return 0.05*x + 0.02*y },
		func(x, y float64) float64 { return -0.01*x + 0.03*y })
	su, sv := make([]float64, g.Len()), make([]float64, g.Len())
	for p := range su {
		su[p] = 0.01 + 0.002*float64(p%5)
		sv[p] = 0.02 - 0.001*float64(p%7)
	}
	u0[2*7+4] = math.NaN() // a hole in the window, so the fit is irregular
	return g, u0, v0, su, sv, []int{3*7 + 3, 1*7 + 1, 6*7 + 1}
}

// stdName names component c of propagatedStd and monteCarloStd.
func stdName(c int) string { return [6]string{"Ux", "Uy", "Vx", "Vy", "E11", "E12"}[c] }

// propagatedStd returns the propagated std of Ux, Uy, Vx, Vy, E11 and E12.
func propagatedStd(p Gradient) [6]float64 {
	s11, _, s12 := p.StdGreenLagrange()
	return [6]float64{math.Sqrt(p.VarUx), math.Sqrt(p.VarUy), math.Sqrt(p.VarVx), math.Sqrt(p.VarVy), s11, s12}
}

// monteCarloStd returns, per probe, the sample std of Ux, Uy, Vx, Vy,
// E11 and E12 over 4000 fits of u0 + du, v0 + dv, draw filling the
// errors du and dv of each trial.
func monteCarloStd(g Grid, u0, v0 []float64, probes []int, opt GradientOptions, draw func(du, dv []float64)) [][6]float64 {
	const trials = 4000
	type acc struct{ s, s2 [6]float64 }
	accs := make([]acc, len(probes))
	u, v := make([]float64, g.Len()), make([]float64, g.Len())
	du, dv := make([]float64, g.Len()), make([]float64, g.Len())
	for range trials {
		draw(du, dv)
		for p := range u {
			u[p], v[p] = u0[p]+du[p], v0[p]+dv[p]
		}
		res, _ := Gradients(context.Background(), g, u, v, nil, nil, opt)
		for k, p := range probes {
			m := Compute(res[p].F(), GreenLagrangeMeasure)
			x := [6]float64{res[p].Ux, res[p].Uy, res[p].Vx, res[p].Vy, m.E[0][0], m.E[0][1]}
			for c := range x {
				accs[k].s[c] += x[c]
				accs[k].s2[c] += x[c] * x[c]
			}
		}
	}
	out := make([][6]float64, len(probes))
	for k := range probes {
		for c := range out[k] {
			mean := accs[k].s[c] / trials
			out[k][c] = math.Sqrt((accs[k].s2[c] - trials*mean*mean) / (trials - 1))
		}
	}
	return out
}

// Results do not depend on the number of goroutines (project rule).
func TestGradientsDeterministic(t *testing.T) {
	g := Grid{Step: 3, Nx: 31, Ny: 23}
	r := rand.New(rand.NewPCG(9, 9))
	u, v, s := make([]float64, g.Len()), make([]float64, g.Len()), make([]float64, g.Len())
	for p := range u {
		u[p], v[p], s[p] = r.NormFloat64(), r.NormFloat64(), r.Float64()
		if r.Float64() < 0.1 {
			u[p] = math.NaN()
		}
	}
	a, _ := Gradients(context.Background(), g, u, v, s, s, GradientOptions{Threads: 1, Fit: Quadratic})
	b, _ := Gradients(context.Background(), g, u, v, s, s, GradientOptions{Threads: 5, Fit: Quadratic})
	for p := range a {
		if a[p] != b[p] && !(a[p].Status != GradOK && b[p].Status == a[p].Status) {
			t.Fatalf("point %d: %+v with 1 thread, %+v with 5", p, a[p], b[p])
		}
	}
}

func TestGradientsErrors(t *testing.T) {
	g := Grid{Step: 1, Nx: 4, Ny: 4}
	u := make([]float64, 16)
	err := GradientOptions{Window: 4, Fit: 7, Threads: -1}.Validate()
	if err == nil {
		t.Fatal("want error")
	}
	for _, s := range []string{"strain window 4", "strain fit", "threads -1"} {
		if !strings.Contains(err.Error(), s) {
			t.Errorf("error %q does not mention %q", err, s)
		}
	}
	if err := (GradientOptions{Fit: Quadratic, MinPoints: 6}).Validate(); err == nil {
		t.Error("quadratic fit with 6 points: want error")
	}
	if _, err := Gradients(context.Background(), g, u, u[:3], nil, nil, GradientOptions{}); err == nil {
		t.Error("mismatched lengths: want error")
	}
	if _, err := Gradients(context.Background(), g, u, u, u, nil, GradientOptions{}); err == nil {
		t.Error("stdU without stdV: want error")
	}
	if _, err := Gradients(context.Background(), Grid{Step: 0, Nx: 4, Ny: 4}, u, u, nil, nil, GradientOptions{}); err == nil {
		t.Error("zero step: want error")
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	for _, th := range []int{1, 2} {
		if _, err := Gradients(ctx, g, u, u, nil, nil, GradientOptions{Threads: th}); err == nil {
			t.Errorf("cancelled context, %d threads: want error", th)
		}
	}
}

// VSG = (window − 1)·step + subset (iDICs, "A Good Practices Guide for
// Digital Image Correlation", Jones & Iadicola (eds.), 2018; form from
// memory, see shared REFERENCES.md). Worked by hand: (5 − 1)·8 + 31 = 63 and
// (15 − 1)·2 + 21 = 49.
func TestVSG(t *testing.T) {
	if got := VSG(5, 8, 31); got != 63 {
		t.Errorf("VSG(5, 8, 31) = %v, want 63", got)
	}
	if got := VSG(15, 2, 21); got != 49 {
		t.Errorf("VSG(15, 2, 21) = %v, want 49", got)
	}
}

func BenchmarkGradients(b *testing.B) {
	g := Grid{Step: 4, Nx: 200, Ny: 200}
	r := rand.New(rand.NewPCG(1, 1))
	u, v, s := make([]float64, g.Len()), make([]float64, g.Len()), make([]float64, g.Len())
	for p := range u {
		u[p], v[p], s[p] = r.NormFloat64(), r.NormFloat64(), 0.01
	}
	for _, c := range []struct {
		name string
		opt  GradientOptions
	}{
		{"plane_w5", GradientOptions{Window: 5, Threads: 1}},
		{"quadratic_w9", GradientOptions{Window: 9, Fit: Quadratic, Threads: 1}},
		// Subsets of 31 px on the 4 px grid: errors correlated 7 points
		// out, the worst case of the correlated propagation.
		{"plane_w5_subset31", GradientOptions{Window: 5, Threads: 1, Subset: 31}},
		// The defaults' correlation reach (subset 31, step 8): 3 points.
		{"plane_w5_subset15", GradientOptions{Window: 5, Threads: 1, Subset: 15}},
		{"quadratic_w9_subset31", GradientOptions{Window: 9, Fit: Quadratic, Threads: 1, Subset: 31}},
	} {
		b.Run(c.name, func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				if _, err := Gradients(context.Background(), g, u, v, s, s, c.opt); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(g.Len())*float64(b.N)/b.Elapsed().Seconds(), "points/s")
		})
	}
}

// TestGradientStdCorrelated: with GradientOptions.Subset set, the
// propagated std allows for the correlation of neighbouring points whose
// subsets share pixels. The Monte Carlo errors are made that way: each
// point's error is σ_k times the normalised sum of white noise over the
// M×M pixels of its subset, so two points correlate exactly as the share
// of pixels they have in common, the model of Gradients. The sample std
// of each gradient and strain component must agree with the propagated
// one within 5 % (4000 trials; the law of propagation of uncertainty with
// correlated inputs, JCGM 100:2008, 5.2). Treating the errors as
// independent (Subset 0) must understate the plane fit's std by more than
// 10 % (for the quadratic fit at a corner it can also overstate it).
func TestGradientStdCorrelated(t *testing.T) {
	const step, m = 5, 13 // px: neighbours 1 and 2 steps apart share pixels
	g, u0, v0, su, sv, probes := stdCase(Grid{X0: m, Y0: m, Step: step, Nx: 7, Ny: 7})
	w, h := 2*m+(g.Nx-1)*step+1, 2*m+(g.Ny-1)*step+1 // pixels of the noise
	// subsetNoise returns, per point, the sum of the pixel noise nz over
	// its subset divided by m (unit variance).
	subsetNoise := func(nz []float64) []float64 {
		out := make([]float64, g.Len())
		for j := range g.Ny {
			for i := range g.Nx {
				x, y := g.At(i, j)
				s := 0.0
				for yy := int(y) - m/2; yy <= int(y)+m/2; yy++ {
					for xx := int(x) - m/2; xx <= int(x)+m/2; xx++ {
						s += nz[yy*w+xx]
					}
				}
				out[j*g.Nx+i] = s / m
			}
		}
		return out
	}
	for _, fit := range []Fit{Plane, Quadratic} {
		opt := GradientOptions{Window: 5, Fit: fit, Threads: 1, Subset: m}
		pred, err := Gradients(context.Background(), g, u0, v0, su, sv, opt)
		if err != nil {
			t.Fatal(err)
		}
		indep := opt
		indep.Subset = 0
		lower, err := Gradients(context.Background(), g, u0, v0, su, sv, indep)
		if err != nil {
			t.Fatal(err)
		}
		r := rand.New(rand.NewPCG(11, uint64(fit)))
		nz := make([]float64, w*h)
		sd := monteCarloStd(g, u0, v0, probes, opt, func(du, dv []float64) {
			for c, out := range [][]float64{du, dv} {
				for p := range nz {
					nz[p] = r.NormFloat64()
				}
				z := subsetNoise(nz)
				sc := su
				if c == 1 {
					sc = sv
				}
				for p := range out {
					out[p] = sc[p] * z[p]
				}
			}
		})
		for k, p := range probes {
			if pred[p].Status != GradOK {
				t.Fatalf("%v probe %d: status %v", fit, p, pred[p].Status)
			}
			want, indepStd := propagatedStd(pred[p]), propagatedStd(lower[p])
			for c := range want {
				if math.Abs(sd[k][c]/want[c]-1) > 0.05 {
					t.Errorf("%v point %d std %s: propagated %.4g, Monte Carlo %.4g", fit, p, stdName(c), want[c], sd[k][c])
				}
				if fit == Plane && !(indepStd[c] < 0.9*sd[k][c]) {
					t.Errorf("%v point %d std %s: independent errors give %.4g, Monte Carlo %.4g: want it understated", fit, p, stdName(c), indepStd[c], sd[k][c])
				}
			}
			if k == 0 {
				t.Logf("%v: std E11 propagated %.4g (independent %.4g), Monte Carlo %.4g", fit, want[4], indepStd[4], sd[k][4])
			}
		}
	}
}

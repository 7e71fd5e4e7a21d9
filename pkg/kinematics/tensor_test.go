package kinematics

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

func near(a, b, tol float64) bool { return math.Abs(a-b) <= tol }

func tensorNear(t *testing.T, what string, got, want Tensor, tol float64) {
	t.Helper()
	for i := range 2 {
		for j := range 2 {
			if !near(got[i][j], want[i][j], tol) {
				t.Errorf("%s[%d][%d] = %.15g, want %.15g (tol %g)", what, i, j, got[i][j], want[i][j], tol)
			}
		}
	}
}

// Uniaxial stretch λ along x, F = diag(λ, 1): E11 = (λ² − 1)/2,
// H11 = ln λ, A11 = (1 − λ⁻²)/2, all other components zero (closed forms of
// the definitions; Holzapfel 2000, Nonlinear Solid Mechanics, §2.5–2.6).
func TestUniaxialStretch(t *testing.T) {
	for _, lam := range []float64{0.5, 0.8, 0.999, 1, 1.0001, 1.05, 1.5, 3} {
		F := Tensor{{lam, 0}, {0, 1}}
		m := Compute(F, GreenLagrangeMeasure)
		tensorNear(t, "E", m.E, Tensor{{(lam*lam - 1) / 2, 0}, {0, 0}}, 1e-15)
		tensorNear(t, "H", m.H, Tensor{{math.Log(lam), 0}, {0, 0}}, 1e-15)
		tensorNear(t, "A", m.A, Tensor{{(1 - 1/(lam*lam)) / 2, 0}, {0, 0}}, 1e-15)
		tensorNear(t, "eps", m.Eps, Tensor{{lam - 1, 0}, {0, 0}}, 1e-15)
		tensorNear(t, "U", m.U, F, 1e-15)
		if !near(m.DetF, lam, 1e-15) || m.RotationDeg != 0 || !m.SmallStrainValid {
			t.Errorf("λ=%v: detF %v rotation %v valid %v", lam, m.DetF, m.RotationDeg, m.SmallStrainValid)
		}
		if e := (lam*lam - 1) / 2; !near(m.EMax, max(e, 0), 1e-15) || !near(m.EMin, min(e, 0), 1e-15) {
			t.Errorf("λ=%v: principal %v, %v", lam, m.EMax, m.EMin)
		}
	}
}

// Simple shear x = X + γY, F = [[1, γ], [0, 1]]: E = [[0, γ/2], [γ/2, γ²/2]]
// and the polar rotation satisfies tan θ = −γ/2 (Holzapfel 2000, Nonlinear
// Solid Mechanics, simple-shear example). In image axes (y down) the negative
// θ is a counter-clockwise turn on screen.
func TestSimpleShear(t *testing.T) {
	for _, g := range []float64{1e-4, 0.1, 0.5, 1, 2} {
		F := Tensor{{1, g}, {0, 1}}
		m := Compute(F, GreenLagrangeMeasure)
		tensorNear(t, "E", m.E, Tensor{{0, g / 2}, {g / 2, g * g / 2}}, 1e-15)
		theta := m.RotationDeg * math.Pi / 180
		if !near(math.Tan(theta), -g/2, 1e-14) {
			t.Errorf("γ=%v: tan θ = %v, want %v", g, math.Tan(theta), -g/2)
		}
		tensorNear(t, "RU", m.R.Mul(m.U), F, 1e-14)
		tensorNear(t, "VR", m.V.Mul(m.R), F, 1e-14)
		if !near(m.DetF, 1, 1e-15) {
			t.Errorf("γ=%v: det F = %v, want 1", g, m.DetF)
		}
		// Principal stretches of simple shear: λ1,2 = √(1 + γ²/4) ± γ/2, so
		// H has principal values ±ln λ1 (Holzapfel 2000, simple shear).
		h1, h2, _ := Principal(m.H)
		l1 := math.Sqrt(1+g*g/4) + g/2
		if !near(h1, math.Log(l1), 1e-14) || !near(h2, -math.Log(l1), 1e-14) {
			t.Errorf("γ=%v: Hencky principal %v, %v, want ±%v", g, h1, h2, math.Log(l1))
		}
	}
}

// A rigid rotation has zero finite strain, while the small strain
// ε11 = ε22 = cos θ − 1 is not zero (definitions; any continuum-mechanics
// text, e.g. Holzapfel 2000). Small strain must be flagged beyond
// SmallStrainMaxRotationDeg.
func TestRigidRotation(t *testing.T) {
	for _, deg := range []float64{30, -30, 170, 1.5, -1.9, 2.5} {
		F := Rotation(deg * math.Pi / 180)
		m := Compute(F, HenckyMeasure)
		zero := Tensor{}
		tensorNear(t, "E", m.E, zero, 1e-12)
		tensorNear(t, "A", m.A, zero, 1e-12)
		tensorNear(t, "H", m.H, zero, 1e-12)
		tensorNear(t, "U", m.U, Identity(), 1e-12)
		if !near(m.RotationDeg, deg, 1e-12) {
			t.Errorf("rotation %v°: got %v°", deg, m.RotationDeg)
		}
		c := math.Cos(deg*math.Pi/180) - 1
		tensorNear(t, "eps", m.Eps, Tensor{{c, 0}, {0, c}}, 1e-15)
		wantValid := math.Abs(deg) <= SmallStrainMaxRotationDeg
		if m.SmallStrainValid != wantValid {
			t.Errorf("rotation %v°: SmallStrainValid = %v, want %v", deg, m.SmallStrainValid, wantValid)
		}
		if math.Abs(deg) == 30 && math.Abs(m.Eps[0][0]) < 0.1 {
			t.Errorf("rotation 30°: ε11 = %v, want cos 30° − 1 ≈ −0.134", m.Eps[0][0])
		}
	}
}

// A positive angle turns +x toward +y (package convention).
func TestRotationSign(t *testing.T) {
	F := Rotation(0.3)
	x := [2]float64{F[0][0], F[1][0]} // image of the unit +x vector
	if !(x[1] > 0) || !near(RotationAngle(F), 0.3, 1e-15) {
		t.Errorf("Rotation(0.3) maps +x to %v, angle %v", x, RotationAngle(F))
	}
}

// For det F ≤ 0 there is no polar decomposition, hence no Hencky strain,
// rotation or F⁻¹ (Holzapfel 2000: F must have det F > 0); those results
// must be NaN and flagged, while E = ½(FᵀF − I) is still defined.
func TestNonInvertible(t *testing.T) {
	for _, F := range []Tensor{{{-1, 0}, {0, 1}}, {{1, 2}, {0.5, 1}}, {{0, 0}, {0, 0}}} {
		m := Compute(F, HenckyMeasure)
		if m.Invertible || m.SmallStrainValid {
			t.Errorf("F=%v (det %v): Invertible %v SmallStrainValid %v, want false", F, F.Det(), m.Invertible, m.SmallStrainValid)
		}
		if !math.IsNaN(m.H[0][0]) || !math.IsNaN(m.A[0][0]) || !math.IsNaN(m.R[0][0]) || !math.IsNaN(m.EMax) {
			t.Errorf("F=%v: want NaN Hencky, Almansi, rotation and principal values, got %v %v %v %v", F, m.H, m.A, m.R, m.EMax)
		}
		if m.E.IsFinite() != F.IsFinite() {
			t.Errorf("F=%v: Green–Lagrange should still exist, got %v", F, m.E)
		}
	}
}

// randomF returns a random F with det F > 0.2 and moderate condition.
func randomF(r *rand.Rand) Tensor {
	for {
		F := Tensor{{1 + 0.8*(r.Float64()-0.5), 0.8 * (r.Float64() - 0.5)}, {0.8 * (r.Float64() - 0.5), 1 + 0.8*(r.Float64()-0.5)}}
		F = Rotation(2 * math.Pi * r.Float64()).Mul(F)
		if F.Det() > 0.2 {
			return F
		}
	}
}

func toDense(t Tensor) *mat.Dense {
	return mat.NewDense(2, 2, []float64{t[0][0], t[0][1], t[1][0], t[1][1]})
}

func fromDense(d mat.Matrix) Tensor {
	return Tensor{{d.At(0, 0), d.At(0, 1)}, {d.At(1, 0), d.At(1, 1)}}
}

// The closed-form polar decomposition agrees with the one built from gonum's
// SVD: F = WΣVᵀ gives R = WVᵀ and U = VΣVᵀ (Golub & Van Loan, Matrix
// Computations, polar decomposition via the SVD); principal values and
// Hencky strain agree with gonum's EigenSym (gonum.org/v1/gonum/mat).
func TestPolarAgainstGonum(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	for range 2000 {
		F := randomF(r)
		R, U, V, ok := Polar(F)
		if !ok {
			t.Fatalf("Polar(%v) not ok", F)
		}
		var svd mat.SVD
		if !svd.Factorize(toDense(F), mat.SVDFull) {
			t.Fatal("SVD failed")
		}
		var W, Vs mat.Dense
		svd.UTo(&W)
		svd.VTo(&Vs)
		s := svd.Values(nil)
		var Rg, Ug, tmp mat.Dense
		Rg.Mul(&W, Vs.T())
		tmp.Mul(&Vs, mat.NewDiagDense(2, s))
		Ug.Mul(&tmp, Vs.T())
		tensorNear(t, "R", R, fromDense(&Rg), 1e-12)
		tensorNear(t, "U", U, fromDense(&Ug), 1e-12)
		tensorNear(t, "V", V.Mul(R), F, 1e-12)

		// Principal values of E against EigenSym.
		E := GreenLagrange(F)
		var es mat.EigenSym
		if !es.Factorize(mat.NewSymDense(2, []float64{E[0][0], E[0][1], E[1][0], E[1][1]}), true) {
			t.Fatal("EigenSym failed")
		}
		ev := es.Values(nil) // ascending
		e1, e2, ang := Principal(E)
		if !near(e1, ev[1], 1e-12) || !near(e2, ev[0], 1e-12) {
			t.Errorf("principal of %v: %v, %v; gonum %v", E, e1, e2, ev)
		}
		var vec mat.Dense
		es.VectorsTo(&vec)
		if e1-e2 > 1e-6 {
			// The e1 direction is ± the gonum eigenvector: compare |cross| ≈ 0.
			a := ang * math.Pi / 180
			cross := math.Cos(a)*vec.At(1, 1) - math.Sin(a)*vec.At(0, 1)
			if math.Abs(cross) > 1e-9 {
				t.Errorf("principal angle %v° of %v off the gonum eigenvector (%v, %v)", ang, E, vec.At(0, 1), vec.At(1, 1))
			}
		}

		// Hencky ln U = ½ Σ ln λ_i n_i n_iᵀ with λ_i, n_i the eigenpairs of C.
		C := F.T().Mul(F)
		if !es.Factorize(mat.NewSymDense(2, []float64{C[0][0], C[0][1], C[1][0], C[1][1]}), true) {
			t.Fatal("EigenSym failed")
		}
		ev = es.Values(nil)
		es.VectorsTo(&vec)
		var H Tensor
		for k := range 2 {
			l := math.Log(ev[k]) / 2
			for i := range 2 {
				for j := range 2 {
					H[i][j] += l * vec.At(i, k) * vec.At(j, k)
				}
			}
		}
		tensorNear(t, "H", Hencky(F), H, 1e-12)

		// Euler–Almansi against gonum's inverse.
		var Fi mat.Dense
		if err := Fi.Inverse(toDense(F)); err != nil {
			t.Fatal(err)
		}
		var Bi mat.Dense
		Bi.Mul(Fi.T(), &Fi)
		Ag := fromDense(&Bi)
		tensorNear(t, "A", EulerAlmansi(F), Tensor{{(1 - Ag[0][0]) / 2, -Ag[0][1] / 2}, {-Ag[1][0] / 2, (1 - Ag[1][1]) / 2}}, 1e-12)
	}
}

// Hencky strain near the isotropic case (equal eigenvalues) stays accurate:
// F = λR gives U = λI and so H = ln U = ln λ·I exactly (definition of the
// Hencky strain; Holzapfel 2000, Nonlinear Solid Mechanics).
func TestHenckyIsotropic(t *testing.T) {
	for _, lam := range []float64{0.9, 1, 1 + 1e-9, 1.2} {
		F := Rotation(0.4).Scale(lam)
		F[0][0] += 1e-13 // tiny anisotropy
		tensorNear(t, "H", Hencky(F), Tensor{{math.Log(lam), 0}, {0, math.Log(lam)}}, 1e-12)
	}
}

// A diagonal tensor rotated by Q(θ) has the same principal values and its
// major principal direction at θ (eigen-decomposition S = Q·diag·Qᵀ; common
// practice).
func TestPrincipalAngle(t *testing.T) {
	for _, deg := range []float64{0, 10, 45, 89, 90, -30, -89} {
		Q := Rotation(deg * math.Pi / 180)
		S := Q.Mul(Tensor{{0.03, 0}, {0, -0.01}}).Mul(Q.T())
		e1, e2, a := Principal(S)
		want := deg
		if want <= -90 {
			want += 180
		}
		if !near(e1, 0.03, 1e-15) || !near(e2, -0.01, 1e-15) || !near(a, want, 1e-9) {
			t.Errorf("rotated by %v°: e1 %v e2 %v angle %v", deg, e1, e2, a)
		}
	}
}

// Von Mises equivalent strain: for an isochoric uniaxial strain
// (e2 = −e1/2) it equals e1; for equibiaxial strain e it is 2e (definition
// ε_eq = √(⅔ ε:ε) with e3 = −(e1 + e2); common practice).
func TestVonMises(t *testing.T) {
	cases := []struct{ e1, e2, want float64 }{
		{0.02, -0.01, 0.02},
		{0.01, 0.01, 0.02},
		{0.01, -0.01, 2 / math.Sqrt(3) * 0.01},
		{0, 0, 0},
	}
	for _, c := range cases {
		if got := VonMises(c.e1, c.e2); !near(got, c.want, 1e-15) {
			t.Errorf("VonMises(%v, %v) = %v, want %v", c.e1, c.e2, got, c.want)
		}
	}
}

func TestParseMeasure(t *testing.T) {
	for _, m := range []Measure{GreenLagrangeMeasure, HenckyMeasure, EulerAlmansiMeasure, SmallStrainMeasure} {
		got, err := ParseMeasure(m.String())
		if err != nil || got != m {
			t.Errorf("ParseMeasure(%q) = %v, %v", m.String(), got, err)
		}
	}
	if _, err := ParseMeasure("lagrange"); err == nil {
		t.Error("ParseMeasure(lagrange): want error")
	}
}

package synth

import (
	"errors"
	"math"
	"math/rand/v2"
	"reflect"
	"testing"
)

// testMotions are the motions every generic check runs on.
func testMotions() map[string]Motion {
	return map[string]Motion{
		"identity":    Identity{},
		"translation": Translation{3.25, -1.5},
		"rotation":    Rotation{Angle: 37, CX: 100, CY: 80, U: 1, V: -2},
		"rotation170": Rotation{Angle: 170, CX: 128, CY: 128},
		"affine30":    Affine{F: [2][2]float64{{1.3, 0.05}, {-0.1, 0.8}}, CX: 64, CY: 64, U: 0.5, V: 0.25},
		"affineBig":   Affine{F: [2][2]float64{{0.5, -0.866}, {0.866 * 1.2, 0.5 * 1.2}}, CX: 10, CY: -5},
		"quadratic": Quadratic{P: [12]float64{0.5, 0.01, -0.005, -0.3, 0.004, 0.02, 1e-4, -5e-5, 2e-5, -3e-5, 1e-4, 6e-5},
			CX: 128, CY: 128},
		"star":      Star{Amplitude: 0.5, PeriodMin: 10, PeriodMax: 300, X0: 0, X1: 511, Y0: 128},
		"starGeom":  Star{Amplitude: 0.5, PeriodMin: 10, PeriodMax: 300, X0: 0, X1: 511, Y0: 128, Geometric: true},
		"hole":      Hole{E: 70000, Nu: 0.33, Radius: 40, Stress: 350, MMPerPx: 0.01, CX: 128, CY: 128},
		"holeTight": Hole{E: 1000, Nu: 0.45, Radius: 30, Stress: 15, MMPerPx: 0.02, CX: 100, CY: 90},
	}
}

// TestInverseRoundTrip: κ⁻¹(κ(X)) = X. Closed-form inverses (translation,
// rotation, affine) to 1e-9 px; Newton inverses (quadratic, star, hole) to
// 1e-6 px, the accuracy the renderer promises.
func TestInverseRoundTrip(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for name, m := range testMotions() {
		tol := 1e-9
		switch m.(type) {
		case Quadratic, Star, Hole:
			tol = 1e-6
		}
		worst := 0.0
		for range 2000 {
			X, Y := -20+300*rng.Float64(), -20+300*rng.Float64()
			if b, ok := m.(Body); ok && !b.Material(X, Y) {
				continue
			}
			x, y := m.Map(X, Y)
			X2, Y2, err := m.Inverse(x, y)
			if err != nil {
				t.Fatalf("%s: Inverse(%g, %g) of X = (%g, %g): %v", name, x, y, X, Y, err)
			}
			worst = math.Max(worst, math.Hypot(X2-X, Y2-Y))
			// The residual in the current configuration, too.
			x2, y2 := m.Map(X2, Y2)
			worst = math.Max(worst, math.Hypot(x2-x, y2-y))
		}
		if worst > tol {
			t.Errorf("%s: worst round-trip error %.3g px, want < %g", name, worst, tol)
		}
	}
}

// TestGradientMatchesMap: F = ∂x/∂X (definition) against central
// differences of Map, so the analytic gradients (star, hole) are checked
// independently of their derivation.
func TestGradientMatchesMap(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	const h = 1e-4
	for name, m := range testMotions() {
		for range 300 {
			X, Y := 300*rng.Float64(), 300*rng.Float64()
			if b, ok := m.(Body); ok && !b.Material(X-2*h, Y) || (ok && !b.Material(X+2*h, Y)) ||
				(ok && !b.Material(X, Y-2*h)) || (ok && !b.Material(X, Y+2*h)) {
				continue
			}
			F := m.Gradient(X, Y)
			xp, yp := m.Map(X+h, Y)
			xm, ym := m.Map(X-h, Y)
			xq, yq := m.Map(X, Y+h)
			xn, yn := m.Map(X, Y-h)
			num := [2][2]float64{{(xp - xm) / (2 * h), (xq - xn) / (2 * h)}, {(yp - ym) / (2 * h), (yq - yn) / (2 * h)}}
			for i := range 2 {
				for j := range 2 {
					if d := math.Abs(F[i][j] - num[i][j]); d > 1e-6 {
						t.Fatalf("%s at (%g, %g): F[%d][%d] = %.9g, central difference %.9g", name, X, Y, i, j, F[i][j], num[i][j])
					}
				}
			}
		}
	}
}

// TestSpecRoundTrip: NewMotion(m.Spec()) rebuilds m, and so does parsing
// Spec.String().
func TestSpecRoundTrip(t *testing.T) {
	for name, m := range testMotions() {
		got, err := NewMotion(m.Spec(), 0, 0)
		if err != nil {
			t.Fatalf("%s: NewMotion(%v): %v", name, m.Spec(), err)
		}
		if !reflect.DeepEqual(got, m) {
			t.Errorf("%s: NewMotion(Spec) = %#v, want %#v", name, got, m)
		}
		got, err = ParseMotion(m.Spec().String(), 0, 0)
		if err != nil || !reflect.DeepEqual(got, m) {
			t.Errorf("%s: ParseMotion(%q) = %#v, %v", name, m.Spec().String(), got, err)
		}
	}
}

func TestParseMotionErrors(t *testing.T) {
	for _, text := range []string{
		"spin", "affine:F11", "affine:F11=x", "affine:F11=-1", "affine:G=1",
		"affine:F11=1,F11=2", "star:amplitude=5", "hole:nu=0.7", "hole:E_MPa=-3",
		"hole:stress_MPa=5000,E_MPa=10000", "translation:u=NaN", "star",
	} {
		if _, err := ParseMotion(text, 0, 0); !errors.Is(err, ErrMotion) {
			t.Errorf("ParseMotion(%q) error = %v, want ErrMotion", text, err)
		}
	}
	// Image-relative defaults: the star and hole centres come from the image.
	m, err := ParseMotion("hole", 201, 101)
	if err != nil {
		t.Fatal(err)
	}
	if h := m.(Hole); h.CX != 100 || h.CY != 50 || h.Radius != 20 {
		t.Errorf("hole defaults for 201×101: %+v", h)
	}
}

// TestKirsch checks the hole displacement field (whose form is from
// memory) against the Kirsch stresses (Kirsch 1898; Timoshenko & Goodier,
// "Theory of Elasticity"): strains from central differences of the
// displacement, turned into stresses by Hooke's law in plane stress
// (σ = E/(1−ν²)·(ε_xx + ν ε_yy) etc.), must match the closed-form
// stresses; at the hole edge the hoop stress is 3S at θ = 90° and −S at
// θ = 0°, and the edge is traction free (σ_rr = σ_rθ = 0).
func TestKirsch(t *testing.T) {
	h := Hole{E: 70000, Nu: 0.3, Radius: 40, Stress: 100, MMPerPx: 0.01, CX: 0, CY: 0}
	stress := func(X, Y float64) (sxx, syy, sxy float64) {
		const d = 1e-3
		ux1, vx1 := h.Displacement(X+d, Y)
		ux0, vx0 := h.Displacement(X-d, Y)
		uy1, vy1 := h.Displacement(X, Y+d)
		uy0, vy0 := h.Displacement(X, Y-d)
		exx := (ux1 - ux0) / (2 * d)
		eyy := (vy1 - vy0) / (2 * d)
		exy := ((uy1-uy0)/(2*d) + (vx1-vx0)/(2*d)) / 2
		c := h.E / (1 - h.Nu*h.Nu)
		return c * (exx + h.Nu*eyy), c * (eyy + h.Nu*exx), h.E / (1 + h.Nu) * exy
	}
	polar := func(sxx, syy, sxy, th float64) (srr, stt, srt float64) {
		c, s := math.Cos(th), math.Sin(th)
		srr = sxx*c*c + syy*s*s + 2*sxy*s*c
		stt = sxx*s*s + syy*c*c - 2*sxy*s*c
		srt = (syy-sxx)*s*c + sxy*(c*c-s*s)
		return
	}
	tol := 1e-4 * h.Stress
	for _, r := range []float64{40, 41, 50, 80, 200, 2000} {
		for _, deg := range []float64{0, 15, 45, 60, 90, 135, 200, 300} {
			th := deg * math.Pi / 180
			X, Y := r*math.Cos(th), r*math.Sin(th)
			sxx, syy, sxy := stress(X, Y)
			srr, stt, srt := polar(sxx, syy, sxy, th)
			krr, ktt, krt := h.KirschStress(X, Y)
			if math.Abs(srr-krr) > tol || math.Abs(stt-ktt) > tol || math.Abs(srt-krt) > tol {
				t.Errorf("r = %g, θ = %g°: Hooke stresses (%.5g, %.5g, %.5g), Kirsch (%.5g, %.5g, %.5g)", r, deg, srr, stt, srt, krr, ktt, krt)
			}
		}
	}
	edge := []struct{ deg, srr, stt float64 }{{90, 0, 3 * h.Stress}, {0, 0, -h.Stress}, {270, 0, 3 * h.Stress}, {180, 0, -h.Stress}}
	for _, e := range edge {
		th := e.deg * math.Pi / 180
		sxx, syy, sxy := stress(h.Radius*math.Cos(th), h.Radius*math.Sin(th))
		srr, stt, srt := polar(sxx, syy, sxy, th)
		if math.Abs(srr-e.srr) > tol || math.Abs(stt-e.stt) > tol || math.Abs(srt) > tol {
			t.Errorf("hole edge θ = %g°: σ_rr = %.5g, σ_θθ = %.5g, σ_rθ = %.5g; want 0, %g, 0", e.deg, srr, stt, srt, e.stt)
		}
	}
	// Far field: uniaxial stress S along x.
	sxx, syy, sxy := stress(1e5, 3e4)
	if math.Abs(sxx-h.Stress) > 1e-3*h.Stress || math.Abs(syy) > 1e-3*h.Stress || math.Abs(sxy) > 1e-3*h.Stress {
		t.Errorf("far field stress (%g, %g, %g), want (%g, 0, 0)", sxx, syy, sxy, h.Stress)
	}
}

// TestHoleInverse: points inside the deformed hole have no material; points
// on the material map back to it.
func TestHoleInverse(t *testing.T) {
	h := testMotions()["holeTight"].(Hole)
	if _, _, err := h.Inverse(h.CX, h.CY); !errors.Is(err, ErrNoMaterial) {
		t.Errorf("Inverse at the centre: %v, want ErrNoMaterial", err)
	}
	if _, _, err := h.Inverse(h.CX+0.9*h.Radius, h.CY); !errors.Is(err, ErrNoMaterial) {
		t.Errorf("Inverse at 0.9 a: %v, want ErrNoMaterial", err)
	}
	x, y := h.Map(h.CX, h.CY+h.Radius*1.001)
	if _, _, err := h.Inverse(x, y); err != nil {
		t.Errorf("Inverse just outside the hole: %v", err)
	}
	if tr := At(h, h.CX+1, h.CY); tr.Material {
		t.Errorf("At inside the hole reports material: %+v", tr)
	}
}

// TestHoleEdgeBound: on the hole edge |u| ≤ 3a|S|/E, the bound the inverse
// uses to classify points deep inside the hole without iterating (derived
// from the displacement form; its maximum 3aS/E at θ = 0 is the classical
// hoop strain 3S/E times a, Kirsch 1898).
func TestHoleEdgeBound(t *testing.T) {
	for _, h := range []Hole{testMotions()["hole"].(Hole), testMotions()["holeTight"].(Hole)} {
		bound := 3 * h.Radius * math.Abs(h.Stress) / h.E
		worst := 0.0
		for deg := 0.0; deg < 360; deg += 0.5 {
			th := deg * math.Pi / 180
			u, v := h.Displacement(h.CX+h.Radius*math.Cos(th), h.CY+h.Radius*math.Sin(th))
			worst = math.Max(worst, math.Hypot(u, v))
		}
		if worst > bound*(1+1e-12) || worst < bound*0.999 {
			t.Errorf("%+v: max |u| on the edge %g, bound 3aS/E = %g", h, worst, bound)
		}
	}
}

package synth

import (
	"errors"
	"fmt"
	"math"
)

// Hole is the elastic field of an infinite plate with a circular hole of
// radius Radius px centred at (CX, CY), under a remote uniaxial stress
// Stress along x, in plane stress (Kirsch 1898; stresses as in Timoshenko &
// Goodier, "Theory of Elasticity"). With μ = E/(2(1 + ν)), κ = (3 − ν)/(1 + ν)
// and polar coordinates (r, θ) about the centre, θ from +x toward +y:
//
//	u_r = S/(8μ)·[r(κ − 1) + 2a²/r + (2r + 2a²(κ + 1)/r − 2a⁴/r³)·cos 2θ]
//	u_θ = −S/(8μ)·[2r + 2a²(κ − 1)/r + 2a⁴/r³]·sin 2θ
//
// This displacement form was recalled from memory; the package tests check
// that strains derived from it give the Kirsch stresses through Hooke's law
// and a traction-free hole edge. Displacements are in px: the strain S/E is
// dimensionless, so the scale MMPerPx only converts results to mm. Points
// with r < Radius are not material: Inverse returns ErrNoMaterial there.
// The rigid-body part is fixed by u = 0 at the centre and no rotation.
type Hole struct {
	E       float64 // Young's modulus, MPa
	Nu      float64 // Poisson's ratio
	Radius  float64 // hole radius a, px
	Stress  float64 // remote stress S along x, MPa (tension > 0)
	MMPerPx float64 // image scale, mm per px (for reports only)
	CX, CY  float64 // hole centre, px
}

// maxHoleStrain bounds the peak strain 3|S|/E: the solution is linear
// elasticity, and Inverse assumes displacements well below the radius.
const maxHoleStrain = 0.05

// Validate checks the parameters.
func (h Hole) Validate() error {
	var errs []error
	if !(h.E > 0) || math.IsInf(h.E, 0) {
		errs = append(errs, fmt.Errorf("%w: hole E = %g MPa: use a positive Young's modulus, e.g. 70000 for aluminium", ErrMotion, h.E))
	}
	if !(h.Nu > -1 && h.Nu <= 0.5) {
		errs = append(errs, fmt.Errorf("%w: hole ν = %g: use a Poisson's ratio in (−1, 0.5]", ErrMotion, h.Nu))
	}
	if !(h.Radius > 0) || math.IsInf(h.Radius, 0) {
		errs = append(errs, fmt.Errorf("%w: hole radius %g px: use a positive radius", ErrMotion, h.Radius))
	}
	if !(h.MMPerPx > 0) || math.IsInf(h.MMPerPx, 0) {
		errs = append(errs, fmt.Errorf("%w: hole scale %g mm/px: use a positive scale", ErrMotion, h.MMPerPx))
	}
	if math.IsNaN(h.Stress) || math.IsNaN(h.CX) || math.IsNaN(h.CY) || math.IsInf(h.CX, 0) || math.IsInf(h.CY, 0) {
		errs = append(errs, fmt.Errorf("%w: hole stress or centre is not finite", ErrMotion))
	}
	if h.E > 0 && !(3*math.Abs(h.Stress)/h.E <= maxHoleStrain) {
		errs = append(errs, fmt.Errorf("%w: hole stress %g MPa with E = %g MPa gives a peak strain 3S/E = %.3g; keep it below %g (linear elasticity)",
			ErrMotion, h.Stress, h.E, 3*math.Abs(h.Stress)/h.E, maxHoleStrain))
	}
	return errors.Join(errs...)
}

// Material reports whether X lies outside the hole (r ≥ Radius).
func (h Hole) Material(X, Y float64) bool {
	dx, dy := X-h.CX, Y-h.CY
	return dx*dx+dy*dy >= h.Radius*h.Radius
}

// polar returns r, cos θ, sin θ, cos 2θ, sin 2θ of X about the centre.
func (h Hole) polar(X, Y float64) (r, c, s, c2, s2 float64) {
	dx, dy := X-h.CX, Y-h.CY
	r2 := dx*dx + dy*dy
	r = math.Sqrt(r2)
	if r == 0 {
		return 0, 1, 0, 1, 0
	}
	c, s = dx/r, dy/r
	return r, c, s, (dx*dx - dy*dy) / r2, 2 * dx * dy / r2
}

func (h Hole) constants() (k, kappa float64) {
	mu := h.E / (2 * (1 + h.Nu))
	return h.Stress / (8 * mu), (3 - h.Nu) / (1 + h.Nu)
}

// Displacement returns (u, v) in px at X. It is the analytic field, also
// evaluated (without physical meaning) inside the hole, except at the centre.
func (h Hole) Displacement(X, Y float64) (u, v float64) {
	r, c, s, c2, s2 := h.polar(X, Y)
	if r == 0 {
		return 0, 0
	}
	k, kap := h.constants()
	a2 := h.Radius * h.Radius
	a4 := a2 * a2
	ur := k * (r*(kap-1) + 2*a2/r + (2*r+2*a2*(kap+1)/r-2*a4/(r*r*r))*c2)
	ut := -k * (2*r + 2*a2*(kap-1)/r + 2*a4/(r*r*r)) * s2
	return ur*c - ut*s, ur*s + ut*c
}

// Map returns X + u(X).
func (h Hole) Map(X, Y float64) (float64, float64) {
	u, v := h.Displacement(X, Y)
	return X + u, Y + v
}

// Inverse solves X + u(X) = x by Newton iteration, and returns
// ErrNoMaterial when x is the image of a point inside the hole.
func (h Hole) Inverse(x, y float64) (float64, float64, error) {
	u, v := h.Displacement(x, y)
	return h.inverseFrom(x, y, x-u, y-v)
}

// errInHole is returned for current points inside the deformed hole. It is
// a fixed value so the renderer's hot loop does not allocate.
var errInHole = fmt.Errorf("%w: the point is inside the hole", ErrNoMaterial)

func (h Hole) inverseFrom(x, y, X, Y float64) (float64, float64, error) {
	dx, dy := x-h.CX, y-h.CY
	r2 := dx*dx + dy*dy
	a2 := h.Radius * h.Radius
	// On the edge r = a, u_r = (S/E)·a·(1 + 2cos 2θ) and
	// u_θ = −2(S/E)·a·sin 2θ (from the formulas above, with
	// S/(8μ)·(κ + 1) = S/(2E)), so |u| ≤ 3a|S|/E there: the deformed edge
	// stays outside the disc of radius a(1 − 3|S|/E) and every point inside
	// that disc is in the hole.
	if in := h.Radius * (1 - 3.01*math.Abs(h.Stress)/h.E); r2 < in*in {
		return x, y, errInHole
	}
	// Start on the material: a guess inside the hole is pushed out to the
	// edge, where the field is tame (inside, the a⁴/r³ terms grow fast).
	if gx, gy := X-h.CX, Y-h.CY; gx*gx+gy*gy < a2 {
		if r := math.Hypot(gx, gy); r > 0 {
			X, Y = h.CX+gx*h.Radius/r, h.CY+gy*h.Radius/r
		}
	}
	X, Y, err := newton(h, x, y, X, Y)
	if err != nil {
		if r2 < a2 {
			// Newton wandered into the hole's analytic continuation and
			// failed; near the edge it converges, so x is in the hole.
			return X, Y, errInHole
		}
		return X, Y, err
	}
	if !h.Material(X, Y) {
		return X, Y, errInHole
	}
	return X, Y, nil
}

// Gradient returns F = I + ∂u/∂X, from the analytic derivatives of u_r and
// u_θ: in the polar basis ∇u = [[∂u_r/∂r, (∂u_r/∂θ − u_θ)/r],
// [∂u_θ/∂r, (∂u_θ/∂θ + u_r)/r]], rotated to x, y.
func (h Hole) Gradient(X, Y float64) [2][2]float64 {
	_, _, F := h.mapGrad(X, Y)
	return F
}

// mapGrad returns κ(X) and F(X), sharing the polar coordinates.
func (h Hole) mapGrad(X, Y float64) (float64, float64, [2][2]float64) {
	r, c, s, c2, s2 := h.polar(X, Y)
	if r == 0 {
		return X, Y, [2][2]float64{{1, 0}, {0, 1}}
	}
	k, kap := h.constants()
	a2 := h.Radius * h.Radius
	a4 := a2 * a2
	r2 := r * r
	r3 := r2 * r
	r4 := r2 * r2
	A := 2*r + 2*a2*(kap+1)/r - 2*a4/r3 // coefficient of cos 2θ in u_r/k
	B := 2*r + 2*a2*(kap-1)/r + 2*a4/r3 // u_θ = −k·B·sin 2θ
	ur := k * (r*(kap-1) + 2*a2/r + A*c2)
	ut := -k * B * s2
	durdr := k * ((kap - 1) - 2*a2/r2 + (2-2*a2*(kap+1)/r2+6*a4/r4)*c2)
	durdt := -2 * k * A * s2
	dutdr := -k * (2 - 2*a2*(kap-1)/r2 - 6*a4/r4) * s2
	dutdt := -2 * k * B * c2
	g00, g01 := durdr, (durdt-ut)/r
	g10, g11 := dutdr, (dutdt+ur)/r
	// ∇u = Q G Qᵀ with Q = [[c, −s], [s, c]].
	q00, q01, q10, q11 := c, -s, s, c
	t00 := q00*g00 + q01*g10
	t01 := q00*g01 + q01*g11
	t10 := q10*g00 + q11*g10
	t11 := q10*g01 + q11*g11
	return X + ur*c - ut*s, Y + ur*s + ut*c, [2][2]float64{
		{1 + t00*q00 + t01*q01, t00*q10 + t01*q11},
		{t10*q00 + t11*q01, 1 + t10*q10 + t11*q11},
	}
}

// KirschStress returns the Kirsch stresses σ_rr, σ_θθ, σ_rθ (MPa) at a
// reference point outside the hole (Kirsch 1898; Timoshenko & Goodier):
//
//	σ_rr = S/2·(1 − a²/r²) + S/2·(1 − 4a²/r² + 3a⁴/r⁴)·cos 2θ
//	σ_θθ = S/2·(1 + a²/r²) − S/2·(1 + 3a⁴/r⁴)·cos 2θ
//	σ_rθ = −S/2·(1 + 2a²/r² − 3a⁴/r⁴)·sin 2θ
func (h Hole) KirschStress(X, Y float64) (srr, stt, srt float64) {
	r, _, _, c2, s2 := h.polar(X, Y)
	q := h.Radius * h.Radius / (r * r)
	S := h.Stress
	srr = S/2*(1-q) + S/2*(1-4*q+3*q*q)*c2
	stt = S/2*(1+q) - S/2*(1+3*q*q)*c2
	srt = -S / 2 * (1 + 2*q - 3*q*q) * s2
	return
}

// Spec returns kind "hole" with E_MPa, nu, radius_px, stress_MPa,
// mm_per_px, cx, cy.
func (h Hole) Spec() Spec {
	return Spec{Kind: "hole", Params: map[string]float64{"E_MPa": h.E, "nu": h.Nu, "radius_px": h.Radius,
		"stress_MPa": h.Stress, "mm_per_px": h.MMPerPx, "cx": h.CX, "cy": h.CY}}
}

// Scale returns the field under the remote stress s·Stress.
func (h Hole) Scale(s float64) Motion {
	r := h
	r.Stress *= s
	return r
}

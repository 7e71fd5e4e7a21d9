package kinematics

import "math"

// Reparam returns the gradient with respect to new coordinates X = φ(x) of
// a gradient g fitted over the image coordinates x, given J = ∂X/∂x at the
// point (J[i][j] = ∂X_i/∂x_j): by the chain rule ∂u/∂X = ∂u/∂x · J⁻¹. The
// displacement components are whatever g was fitted to (for example
// displacements already mapped to the new coordinates). The covariances
// transform as J⁻ᵀ Σ J⁻¹ within each component's block. A gradient that
// is not GradOK, or a singular J, gives a gradient with NaN values and
// g's status (GradDegenerate for a singular J).
func (g Gradient) Reparam(J [2][2]float64) Gradient {
	det := J[0][0]*J[1][1] - J[0][1]*J[1][0]
	if g.Status != GradOK || !(math.Abs(det) > 0) || math.IsNaN(det) || math.IsInf(det, 0) {
		st := g.Status
		if st == GradOK {
			st = GradDegenerate
		}
		n := math.NaN()
		return Gradient{U: g.U, V: g.V, Ux: n, Uy: n, Vx: n, Vy: n, VarUx: n, VarUy: n, CovUxUy: n, VarVx: n, VarVy: n, CovVxVy: n, N: g.N, Status: st}
	}
	// K = J⁻¹; row vector (a, b) times K.
	k := [2][2]float64{{J[1][1] / det, -J[0][1] / det}, {-J[1][0] / det, J[0][0] / det}}
	mul := func(a, b float64) (float64, float64) {
		return a*k[0][0] + b*k[1][0], a*k[0][1] + b*k[1][1]
	}
	cov := func(va, vb, cab float64) (float64, float64, float64) {
		// Kᵀ Σ K for Σ = [[va, cab], [cab, vb]].
		s := [2][2]float64{{va, cab}, {cab, vb}}
		var r [2][2]float64
		for i := range 2 {
			for j := range 2 {
				for p := range 2 {
					for q := range 2 {
						r[i][j] += k[p][i] * s[p][q] * k[q][j]
					}
				}
			}
		}
		return r[0][0], r[1][1], r[0][1]
	}
	out := g
	out.Ux, out.Uy = mul(g.Ux, g.Uy)
	out.Vx, out.Vy = mul(g.Vx, g.Vy)
	out.VarUx, out.VarUy, out.CovUxUy = cov(g.VarUx, g.VarUy, g.CovUxUy)
	out.VarVx, out.VarVy, out.CovVxVy = cov(g.VarVx, g.VarVy, g.CovVxVy)
	return out
}

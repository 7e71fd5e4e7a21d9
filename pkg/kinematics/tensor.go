// Package kinematics turns a measured displacement field into the
// deformation quantities an experimentalist reports: the deformation
// gradient F = I + ∂u/∂X, the Green–Lagrange, Euler–Almansi, Hencky and
// small-strain tensors, the polar decomposition F = RU = VR with its rotation
// angle, principal strains and directions, a von Mises equivalent strain,
// and the area ratio det F.
//
// The package works on plain arrays and regular grids and knows nothing of
// the correlator: [Gradients] fits ∂u/∂X by pointwise local least squares
// over a strain window, [Compute] derives every measure from one F, and
// [ToDeformed] resamples any quantity onto a grid of the deformed image.
//
// # Axes and signs
//
// Tensors are [2][2]float64 indexed [i][j] with 0 = x and 1 = y, in image
// axes: x to the right, y down. F[i][j] = ∂x_i/∂X_j, where X is the position
// in the reference image and x = X + u the position in the deformed image.
//
// The rotation angle is θ = atan2(F21 − F12, F11 + F22), the angle of the
// rotation R of the polar decomposition. A positive θ turns the +x axis toward
// +y. Because y points down in an image, a positive θ is a CLOCKWISE rotation
// as seen on screen (it would be counter-clockwise in the usual
// mathematical axes with y up). Principal angles follow the same rule: they are
// measured from +x toward +y, in degrees.
package kinematics

import "math"

// Tensor is a 2×2 second-order tensor, indexed [i][j] with 0 = x, 1 = y.
type Tensor [2][2]float64

// Identity returns the 2×2 identity tensor.
func Identity() Tensor { return Tensor{{1, 0}, {0, 1}} }

// FromGradient returns F = I + ∂u/∂X from the displacement gradient
// components ux = ∂u/∂X, uy = ∂u/∂Y, vx = ∂v/∂X, vy = ∂v/∂Y.
func FromGradient(ux, uy, vx, vy float64) Tensor {
	return Tensor{{1 + ux, uy}, {vx, 1 + vy}}
}

// Det returns the determinant of t. For t = F it is the area ratio
// da/dA between the deformed and the reference configuration.
func (t Tensor) Det() float64 { return t[0][0]*t[1][1] - t[0][1]*t[1][0] }

// Trace returns t[0][0] + t[1][1].
func (t Tensor) Trace() float64 { return t[0][0] + t[1][1] }

// T returns the transpose of t.
func (t Tensor) T() Tensor { return Tensor{{t[0][0], t[1][0]}, {t[0][1], t[1][1]}} }

// Mul returns the matrix product t·s.
func (t Tensor) Mul(s Tensor) Tensor {
	return Tensor{
		{t[0][0]*s[0][0] + t[0][1]*s[1][0], t[0][0]*s[0][1] + t[0][1]*s[1][1]},
		{t[1][0]*s[0][0] + t[1][1]*s[1][0], t[1][0]*s[0][1] + t[1][1]*s[1][1]},
	}
}

// Add returns t + s.
func (t Tensor) Add(s Tensor) Tensor {
	return Tensor{{t[0][0] + s[0][0], t[0][1] + s[0][1]}, {t[1][0] + s[1][0], t[1][1] + s[1][1]}}
}

// Scale returns a·t.
func (t Tensor) Scale(a float64) Tensor {
	return Tensor{{a * t[0][0], a * t[0][1]}, {a * t[1][0], a * t[1][1]}}
}

// Inv returns the inverse of t and whether it exists (det t ≠ 0 and finite).
// When it does not exist the returned tensor is all NaN.
func (t Tensor) Inv() (Tensor, bool) {
	d := t.Det()
	if d == 0 || math.IsNaN(d) || math.IsInf(d, 0) {
		return nanTensor(), false
	}
	return Tensor{{t[1][1] / d, -t[0][1] / d}, {-t[1][0] / d, t[0][0] / d}}, true
}

// IsFinite reports whether every component of t is finite.
func (t Tensor) IsFinite() bool {
	for i := range 2 {
		for j := range 2 {
			if math.IsNaN(t[i][j]) || math.IsInf(t[i][j], 0) {
				return false
			}
		}
	}
	return true
}

func nanTensor() Tensor {
	n := math.NaN()
	return Tensor{{n, n}, {n, n}}
}

// Rotation returns the rotation tensor [[cos θ, −sin θ], [sin θ, cos θ]] for
// an angle θ in radians (positive turns +x toward +y; see the package doc).
func Rotation(theta float64) Tensor {
	s, c := math.Sincos(theta)
	return Tensor{{c, -s}, {s, c}}
}

// GreenLagrange returns the Green–Lagrange strain E = ½(FᵀF − I), referred to
// the reference configuration (Holzapfel 2000, Nonlinear Solid Mechanics, §2.5).
// It is defined for any F.
func GreenLagrange(F Tensor) Tensor {
	C := F.T().Mul(F)
	return Tensor{{(C[0][0] - 1) / 2, C[0][1] / 2}, {C[1][0] / 2, (C[1][1] - 1) / 2}}
}

// EulerAlmansi returns the Euler–Almansi strain A = ½(I − F⁻ᵀF⁻¹), referred to
// the deformed configuration (Holzapfel 2000, §2.5). It returns NaN components
// when F is singular.
func EulerAlmansi(F Tensor) Tensor {
	Fi, ok := F.Inv()
	if !ok {
		return nanTensor()
	}
	Bi := Fi.T().Mul(Fi) // b⁻¹ = F⁻ᵀF⁻¹
	return Tensor{{(1 - Bi[0][0]) / 2, -Bi[0][1] / 2}, {-Bi[1][0] / 2, (1 - Bi[1][1]) / 2}}
}

// SmallStrain returns the infinitesimal strain ε = ½(∇u + ∇uᵀ) with
// ∇u = F − I. It is a valid strain measure only for small rotations and small
// strains; see [SmallStrainMaxRotationDeg].
func SmallStrain(F Tensor) Tensor {
	s := (F[0][1] + F[1][0]) / 2
	return Tensor{{F[0][0] - 1, s}, {s, F[1][1] - 1}}
}

// RotationAngle returns θ = atan2(F21 − F12, F11 + F22) in radians, the angle
// of the rotation R in F = RU. A positive θ turns +x toward +y: clockwise on
// screen with y down. It is meaningful only when det F > 0.
func RotationAngle(F Tensor) float64 {
	return math.Atan2(F[1][0]-F[0][1], F[0][0]+F[1][1])
}

// Polar returns the polar decomposition F = RU = VR in closed form: R is the
// rotation by θ = [RotationAngle](F), U = RᵀF the right and V = FRᵀ the left
// stretch tensor, both symmetric positive definite. The closed form follows
// from requiring RᵀF to be symmetric (common practice; checked against an SVD
// in the tests). ok is false, and R, U, V are NaN, when det F ≤ 0 (a
// non-invertible or orientation-reversing, non-physical mapping).
func Polar(F Tensor) (R, U, V Tensor, ok bool) {
	if !(F.Det() > 0) || !F.IsFinite() {
		return nanTensor(), nanTensor(), nanTensor(), false
	}
	R = Rotation(RotationAngle(F))
	U = R.T().Mul(F)
	V = F.Mul(R.T())
	// Enforce exact symmetry against rounding.
	U[0][1] = (U[0][1] + U[1][0]) / 2
	U[1][0] = U[0][1]
	V[0][1] = (V[0][1] + V[1][0]) / 2
	V[1][0] = V[0][1]
	return R, U, V, true
}

// Hencky returns the Hencky (logarithmic) strain H = ln U = ½ ln(FᵀF), with
// U the right stretch tensor of [Polar] (Holzapfel 2000, §2.6). The logarithm
// of the symmetric positive-definite C = FᵀF is taken in closed form through
// its eigen-decomposition. It returns NaN components when det F ≤ 0.
func Hencky(F Tensor) Tensor {
	if !(F.Det() > 0) || !F.IsFinite() {
		return nanTensor()
	}
	L := logSym(F.T().Mul(F))
	return L.Scale(0.5)
}

// logSym returns the matrix logarithm of a symmetric positive-definite 2×2
// tensor S = [[p, q], [q, r]] with eigenvalues m ± d, m = (p + r)/2,
// d = √(((p − r)/2)² + q²). Writing ln S = a·I + b·(S − m·I) gives
// a = ½ ln(det S) and b = atanh(d/m)/d, which stays accurate as d → 0.
func logSym(S Tensor) Tensor {
	p, q, r := S[0][0], (S[0][1]+S[1][0])/2, S[1][1]
	m := (p + r) / 2
	h := (p - r) / 2
	d := math.Hypot(h, q)
	det := p*r - q*q
	if !(det > 0) {
		// Eigenvalue product by the stable form (m−d)(m+d) for near-singular
		// input; if it is still not positive S is not positive definite.
		det = (m - d) * (m + d)
		if !(det > 0) {
			return nanTensor()
		}
	}
	a := math.Log(det) / 2
	x := d / m
	var b float64
	if x < 1e-4 {
		// atanh(x)/x = 1 + x²/3 + x⁴/5 + …
		b = (1 + x*x/3 + x*x*x*x/5) / m
	} else {
		b = math.Atanh(x) / d
	}
	return Tensor{{a + b*h, b * q}, {b * q, a - b*h}}
}

// Principal returns the principal values s1 ≥ s2 of the symmetric part of S
// and the angle of the s1 direction in degrees, measured from +x toward +y
// (clockwise on screen) and reduced to (−90°, 90°]. When s1 = s2 every
// direction is principal and the angle is 0.
func Principal(S Tensor) (s1, s2, angleDeg float64) {
	p, q, r := S[0][0], (S[0][1]+S[1][0])/2, S[1][1]
	m := (p + r) / 2
	h := (p - r) / 2
	d := math.Hypot(h, q)
	s1, s2 = m+d, m-d
	if d == 0 {
		return s1, s2, 0
	}
	angleDeg = math.Atan2(q, h) / 2 * 180 / math.Pi
	if angleDeg <= -90 {
		angleDeg += 180
	}
	return s1, s2, angleDeg
}

// VonMises returns the von Mises equivalent strain of a 2D strain with
// principal values E_max, E_min, assuming the out-of-plane principal strain follows
// from incompressibility, e3 = −(E_max + E_min):
//
//	ε_vM = √(⅔(E_max² + E_min² + e3²)) = (2/√3)·√(E_max² + E_max·E_min + E_min²).
//
// This is the equivalent-strain definition ε_eq = √(⅔ ε′:ε′) for a
// deviatoric (isochoric) strain, as used for sheet-metal and plasticity
// measurements (common practice). It is exact for Hencky strain, where
// volume constancy makes the logarithmic strains add to zero, and an
// approximation for the other measures.
func VonMises(eMax, eMin float64) float64 {
	return 2 / math.Sqrt(3) * math.Sqrt(eMax*eMax+eMax*eMin+eMin*eMin)
}

package kinematics

import (
	"fmt"
	"math"
)

// SmallStrainMaxRotationDeg is the largest rotation, in degrees, at which the
// small-strain tensor ε is reported as valid. A rigid rotation θ alone puts
// a spurious ε11 = ε22 = cos θ − 1 into ε: about −6.1·10⁻⁴ (610 µε) at 2°,
// −1.5·10⁻⁴ at 1°, already above the strain noise floor of a typical DIC
// measurement. 2° is the limit chosen here (common practice is "a few
// degrees"); beyond it use a finite-strain measure, which is rotation-free.
const SmallStrainMaxRotationDeg = 2.0

// Measure selects the strain tensor that principal strains and the von Mises
// equivalent strain are computed from.
type Measure int

const (
	// GreenLagrangeMeasure uses E = ½(FᵀF − I) (the default).
	GreenLagrangeMeasure Measure = iota
	// HenckyMeasure uses H = ln U.
	HenckyMeasure
	// EulerAlmansiMeasure uses A = ½(I − F⁻ᵀF⁻¹).
	EulerAlmansiMeasure
	// SmallStrainMeasure uses ε = ½(∇u + ∇uᵀ).
	SmallStrainMeasure
)

// String returns the measure's name as used in parameters:
// "green_lagrange", "hencky", "euler_almansi" or "small".
func (m Measure) String() string {
	switch m {
	case GreenLagrangeMeasure:
		return "green_lagrange"
	case HenckyMeasure:
		return "hencky"
	case EulerAlmansiMeasure:
		return "euler_almansi"
	case SmallStrainMeasure:
		return "small"
	}
	return fmt.Sprintf("Measure(%d)", int(m))
}

// ParseMeasure returns the Measure named s (see [Measure.String]); the empty
// string selects the default, Green–Lagrange.
func ParseMeasure(s string) (Measure, error) {
	switch s {
	case "", "green_lagrange":
		return GreenLagrangeMeasure, nil
	case "hencky":
		return HenckyMeasure, nil
	case "euler_almansi":
		return EulerAlmansiMeasure, nil
	case "small":
		return SmallStrainMeasure, nil
	}
	return 0, fmt.Errorf("strain measure %q: want one of green_lagrange, hencky, euler_almansi, small", s)
}

// Measures holds every deformation quantity derived from one F.
type Measures struct {
	F    Tensor  // deformation gradient
	DetF float64 // area ratio da/dA

	E   Tensor // Green–Lagrange strain
	A   Tensor // Euler–Almansi strain (NaN if det F ≤ 0)
	H   Tensor // Hencky strain ln U (NaN if det F ≤ 0)
	Eps Tensor // small strain

	R, U, V     Tensor  // polar decomposition F = RU = VR (NaN if det F ≤ 0)
	RotationDeg float64 // rotation of R in degrees, positive from +x toward +y (clockwise on screen)

	Basis        Measure // tensor that EMax, EMin, EMaxAngleDeg and VonMises come from
	EMax, EMin   float64 // principal strains of Basis, EMax ≥ EMin
	EMaxAngleDeg float64 // direction of EMax from +x toward +y, degrees in (−90, 90]
	VonMises     float64 // von Mises equivalent strain of EMax, EMin (see [VonMises])

	// Invertible is false when det F ≤ 0 (or F is not finite): the mapping
	// folds or reverses orientation and is non-physical.
	Invertible bool
	// SmallStrainValid is true when the mapping is invertible and
	// |RotationDeg| ≤ SmallStrainMaxRotationDeg, so that Eps is a usable
	// strain measure.
	SmallStrainValid bool
}

// Compute returns every measure derived from F, with principal values and the
// von Mises strain taken from the tensor selected by basis. Quantities that
// do not exist for a non-invertible F are NaN, and Invertible is false.
func Compute(F Tensor, basis Measure) Measures {
	m := Measures{F: F, DetF: F.Det(), Basis: basis}
	m.E = GreenLagrange(F)
	m.Eps = SmallStrain(F)
	m.R, m.U, m.V, m.Invertible = Polar(F)
	if m.Invertible {
		m.A = EulerAlmansi(F)
		m.H = Hencky(F)
		m.RotationDeg = RotationAngle(F) * 180 / math.Pi
		m.SmallStrainValid = math.Abs(m.RotationDeg) <= SmallStrainMaxRotationDeg
	} else {
		m.A, m.H = nanTensor(), nanTensor()
		m.RotationDeg = math.NaN()
	}
	var S Tensor
	switch basis {
	case HenckyMeasure:
		S = m.H
	case EulerAlmansiMeasure:
		S = m.A
	case SmallStrainMeasure:
		S = m.Eps
	default:
		S = m.E
	}
	if S.IsFinite() {
		m.EMax, m.EMin, m.EMaxAngleDeg = Principal(S)
		m.VonMises = VonMises(m.EMax, m.EMin)
	} else {
		n := math.NaN()
		m.EMax, m.EMin, m.EMaxAngleDeg, m.VonMises = n, n, n, n
	}
	return m
}

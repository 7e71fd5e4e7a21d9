package kinematics

import "math"

// Status strings that [Quantities] reports per point, beyond those of
// [GradStatus].
const (
	// StatusNonInvertible marks a point where det F ≤ 0: the fitted mapping
	// folds or reverses orientation, which no real material does.
	StatusNonInvertible = "non_invertible"
)

// QuantityNames lists, in order, the names of the quantities that
// [Quantities] returns (indices 1 = x, 2 = y).
func QuantityNames() []string {
	return []string{
		"F11", "F12", "F21", "F22",
		"E11", "E22", "E12",
		"H11", "H22", "H12",
		"A11", "A22", "A12",
		"eps11", "eps22", "eps12",
		"rotation_deg", "E_max", "E_min", "E_max_angle_deg", "von_mises", "detF",
		"std_E11", "std_E22", "std_E12",
		"eps_valid",
	}
}

// Quantities evaluates [Compute] at every fitted point and returns the results
// as named arrays (see [QuantityNames]) together with a status per point.
//
// Values are NaN where the fit failed or the measure does not exist. The
// small-strain components eps11, eps22, eps12 are NaN where the rotation
// exceeds [SmallStrainMaxRotationDeg], and eps_valid is 1 where they are
// usable and 0 where not. std_E11, std_E22, std_E12 are the propagated
// standard deviations of the Green–Lagrange components (NaN when no std of u
// and v was given). E_max, E_min, E_max_angle_deg and von_mises come from the
// tensor selected by basis.
//
// The status is the fit's [GradStatus] string, or [StatusNonInvertible] where
// the fit succeeded but det F ≤ 0, or "ok".
func Quantities(grads []Gradient, basis Measure) (map[string][]float64, []string) {
	names := QuantityNames()
	n := len(grads)
	q := make(map[string][]float64, len(names))
	buf := make([]float64, n*len(names))
	cols := make([][]float64, len(names))
	for k, name := range names {
		cols[k] = buf[k*n : (k+1)*n : (k+1)*n]
		q[name] = cols[k]
	}
	status := make([]string, n)
	nan := math.NaN()
	for p, g := range grads {
		if g.Status != GradOK {
			for k := range cols {
				cols[k][p] = nan
			}
			cols[len(cols)-1][p] = 0
			status[p] = g.Status.String()
			continue
		}
		m := Compute(g.F(), basis)
		s11, s22, s12 := g.StdGreenLagrange()
		epsOK := 0.0
		e11, e22, e12 := m.Eps[0][0], m.Eps[1][1], m.Eps[0][1]
		if m.SmallStrainValid {
			epsOK = 1
		} else {
			e11, e22, e12 = nan, nan, nan
		}
		vals := [...]float64{
			m.F[0][0], m.F[0][1], m.F[1][0], m.F[1][1],
			m.E[0][0], m.E[1][1], m.E[0][1],
			m.H[0][0], m.H[1][1], m.H[0][1],
			m.A[0][0], m.A[1][1], m.A[0][1],
			e11, e22, e12,
			m.RotationDeg, m.EMax, m.EMin, m.EMaxAngleDeg, m.VonMises, m.DetF,
			s11, s22, s12,
			epsOK,
		}
		for k := range cols {
			cols[k][p] = vals[k]
		}
		if m.Invertible {
			status[p] = "ok"
		} else {
			status[p] = StatusNonInvertible
		}
	}
	return q, status
}

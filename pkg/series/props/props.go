// Package props computes material properties from a tensile-test curve:
// Young's modulus by least squares over a stated strain range (ASTM E111),
// Poisson's ratio from transverse against axial strain (ASTM E132), the
// offset yield strength (ASTM E8/E8M, ISO 6892-1), ultimate strength and
// uniform elongation (ISO 6892-1), and the plastic strain ratio r
// (ISO 10113, ASTM E517).
//
// Every result carries the range of data it came from and the quality of
// the fit, so a report can state both. Strains are dimensionless (not %),
// stresses in whatever unit the caller uses (MPa in Mottle's reports).
//
// These values come from an optical measurement with its own uncertainty.
// Where they feed a safety decision, confirm them with a calibrated
// extensometer (ASTM E83, ISO 9513 classes) and defer to the applicable
// codes and a licensed engineer.
package props

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat"
)

// Fit is an ordinary least-squares straight line y = Slope·x + Intercept
// through N points whose x lie in [XMin, XMax].
type Fit struct {
	Slope     float64 `json:"slope"`
	Intercept float64 `json:"intercept"`
	// R2 is the coefficient of determination.
	R2 float64 `json:"r2"`
	// SlopeStdErr is the standard error of the slope,
	// √(Σresidual²/(N−2) / Σ(x−x̄)²); 0 when N = 2.
	SlopeStdErr float64 `json:"slope_std_err"`
	// SlopeCV is the coefficient of variation of the slope in percent,
	// 100·SlopeStdErr/|Slope|. ASTM E111 writes the same quantity as
	// 100·√((1/R² − 1)/(N − 2)) (form from memory; the two are identical
	// algebraically).
	SlopeCV float64 `json:"slope_cv_percent"`
	N       int     `json:"n"`
	XMin    float64 `json:"x_min"`
	XMax    float64 `json:"x_max"`
}

// FitLine fits a straight line to (x, y) by least squares. It needs at
// least two points with distinct x; NaN points are an error.
func FitLine(x, y []float64) (Fit, error) {
	if len(x) != len(y) {
		return Fit{}, fmt.Errorf("fit line: %d x values but %d y values", len(x), len(y))
	}
	if len(x) < 2 {
		return Fit{}, fmt.Errorf("fit line: %d points, need at least 2", len(x))
	}
	f := Fit{N: len(x), XMin: math.Inf(1), XMax: math.Inf(-1)}
	for i := range x {
		if math.IsNaN(x[i]) || math.IsNaN(y[i]) || math.IsInf(x[i], 0) || math.IsInf(y[i], 0) {
			return Fit{}, fmt.Errorf("fit line: point %d is not finite (%g, %g)", i, x[i], y[i])
		}
		f.XMin = math.Min(f.XMin, x[i])
		f.XMax = math.Max(f.XMax, x[i])
	}
	if f.XMax == f.XMin {
		return Fit{}, fmt.Errorf("fit line: all %d points have x = %g; need distinct x", len(x), f.XMin)
	}
	f.Intercept, f.Slope = stat.LinearRegression(x, y, nil, false)
	mx := stat.Mean(x, nil)
	var sxx, sse, syy float64
	my := stat.Mean(y, nil)
	for i := range x {
		r := y[i] - (f.Intercept + f.Slope*x[i])
		sse += r * r
		sxx += (x[i] - mx) * (x[i] - mx)
		syy += (y[i] - my) * (y[i] - my)
	}
	f.R2 = 1
	if syy > 0 {
		f.R2 = 1 - sse/syy
	}
	if f.N > 2 {
		f.SlopeStdErr = math.Sqrt(sse / float64(f.N-2) / sxx)
	}
	if f.Slope != 0 {
		f.SlopeCV = 100 * f.SlopeStdErr / math.Abs(f.Slope)
	}
	return f, nil
}

// inRange returns the x and y of the points with lo ≤ key ≤ hi.
func inRange(key, x, y []float64, lo, hi float64) (xs, ys []float64) {
	for i := range key {
		if key[i] >= lo && key[i] <= hi {
			xs = append(xs, x[i])
			ys = append(ys, y[i])
		}
	}
	return xs, ys
}

func checkRange(what string, lo, hi float64) error {
	if math.IsNaN(lo) || math.IsNaN(hi) || !(hi > lo) {
		return fmt.Errorf("%s range [%g, %g]: need lower < upper", what, lo, hi)
	}
	return nil
}

func sameLen(what string, n ...int) error {
	for _, m := range n[1:] {
		if m != n[0] {
			return fmt.Errorf("%s: series lengths differ (%v)", what, n)
		}
	}
	return nil
}

// Modulus is Young's modulus from the chord of a least-squares line of
// stress against axial engineering strain (ASTM E111).
type Modulus struct {
	// E is the slope of the stress–strain line, in stress units.
	E float64 `json:"E"`
	// ToeStrain is the strain-axis intercept of the fitted line,
	// −Intercept/E. Offset constructions start from it (toe compensation,
	// common practice).
	ToeStrain float64 `json:"toe_strain"`
	// Lo and Hi are the requested axial strain range; Fit.XMin and Fit.XMax
	// the strains actually used.
	Lo  float64 `json:"strain_lo"`
	Hi  float64 `json:"strain_hi"`
	Fit Fit     `json:"fit"`
}

// YoungsModulus fits stress = E·strain + b to the points whose axial
// engineering strain lies in [lo, hi], following the least-squares method
// of ASTM E111. It needs at least three points in the range, so that the
// fit quality means something.
func YoungsModulus(strain, stress []float64, lo, hi float64) (Modulus, error) {
	if err := errors.Join(sameLen("modulus", len(strain), len(stress)), checkRange("modulus strain", lo, hi)); err != nil {
		return Modulus{}, err
	}
	xs, ys := inRange(strain, strain, stress, lo, hi)
	if len(xs) < 3 {
		return Modulus{}, fmt.Errorf("modulus: %d points with strain in [%g, %g], need at least 3; widen the range or record more frames in the elastic part", len(xs), lo, hi)
	}
	f, err := FitLine(xs, ys)
	if err != nil {
		return Modulus{}, fmt.Errorf("modulus: %w", err)
	}
	if f.Slope <= 0 {
		return Modulus{}, fmt.Errorf("modulus: fitted slope %g over strain [%g, %g] is not positive; check the load sign and the strain range", f.Slope, lo, hi)
	}
	return Modulus{E: f.Slope, ToeStrain: -f.Intercept / f.Slope, Lo: lo, Hi: hi, Fit: f}, nil
}

// Poisson is Poisson's ratio from the slope of transverse against axial
// strain over an axial strain range (ASTM E132): ν = −dε_t/dε_a.
type Poisson struct {
	Nu  float64 `json:"nu"`
	Lo  float64 `json:"strain_lo"`
	Hi  float64 `json:"strain_hi"`
	Fit Fit     `json:"fit"`
}

// PoissonsRatio fits transverse = m·axial + c over the points with axial
// strain in [lo, hi] and returns ν = −m (ASTM E132). The range must lie in
// the elastic part of the curve; at least three points are needed.
func PoissonsRatio(axial, transverse []float64, lo, hi float64) (Poisson, error) {
	if err := errors.Join(sameLen("poisson", len(axial), len(transverse)), checkRange("poisson strain", lo, hi)); err != nil {
		return Poisson{}, err
	}
	xs, ys := inRange(axial, axial, transverse, lo, hi)
	if len(xs) < 3 {
		return Poisson{}, fmt.Errorf("poisson: %d points with axial strain in [%g, %g], need at least 3", len(xs), lo, hi)
	}
	f, err := FitLine(xs, ys)
	if err != nil {
		return Poisson{}, fmt.Errorf("poisson: %w", err)
	}
	return Poisson{Nu: -f.Slope, Lo: lo, Hi: hi, Fit: f}, nil
}

// Yield is an offset yield strength: the stress where the curve meets a
// line parallel to the elastic line, shifted by Offset along the strain
// axis (ASTM E8/E8M; R_p0.2 in ISO 6892-1 for Offset = 0.002).
type Yield struct {
	Stress float64 `json:"stress"`
	Strain float64 `json:"strain"`
	Offset float64 `json:"offset"`
	// E and ToeStrain define the offset line
	// σ = E·(ε − ToeStrain − Offset).
	E         float64 `json:"E"`
	ToeStrain float64 `json:"toe_strain"`
	// Index i says the intersection lies between curve points i and i+1,
	// interpolated linearly.
	Index int `json:"index"`
}

// OffsetYield intersects the curve (strain, stress) with the line
// σ = E·(ε − ε_toe − offset) from m and returns the first crossing where
// the curve passes from above the line to below it, interpolating linearly
// between the two bracketing points. Points are taken in the given (time)
// order; offset is a strain (0.002 for the usual 0.2 %).
func OffsetYield(strain, stress []float64, m Modulus, offset float64) (Yield, error) {
	if err := sameLen("offset yield", len(strain), len(stress)); err != nil {
		return Yield{}, err
	}
	if !(m.E > 0) || math.IsNaN(m.ToeStrain) {
		return Yield{}, fmt.Errorf("offset yield: modulus %g is not positive", m.E)
	}
	if !(offset > 0) {
		return Yield{}, fmt.Errorf("offset yield: offset %g must be positive (0.002 for 0.2 %%)", offset)
	}
	d := func(i int) float64 { return stress[i] - m.E*(strain[i]-m.ToeStrain-offset) }
	for i := 0; i+1 < len(strain); i++ {
		a, b := d(i), d(i+1)
		if math.IsNaN(a) || math.IsNaN(b) {
			continue
		}
		if a >= 0 && b < 0 {
			t := a / (a - b)
			return Yield{
				Stress:    stress[i] + t*(stress[i+1]-stress[i]),
				Strain:    strain[i] + t*(strain[i+1]-strain[i]),
				Offset:    offset,
				E:         m.E,
				ToeStrain: m.ToeStrain,
				Index:     i,
			}, nil
		}
	}
	return Yield{}, fmt.Errorf("offset yield: the curve never falls below the %g offset line; the test may have stopped before yield", offset)
}

// Ultimate is the maximum stress and the elongation at maximum force
// (ISO 6892-1: R_m, A_gt and A_g).
type Ultimate struct {
	// Stress is the highest stress on the curve (R_m).
	Stress float64 `json:"stress"`
	Index  int     `json:"index"`
	// StrainAtMax is the total engineering strain at maximum force (A_gt).
	StrainAtMax float64 `json:"strain_at_max"`
	// PlasticStrainAtMax is A_g = A_gt − R_m/E, the uniform (plastic)
	// elongation; NaN in JSON is avoided by leaving it 0 when E is unknown.
	PlasticStrainAtMax float64 `json:"plastic_strain_at_max"`
	// AtEnd is true when the maximum is the last point: the test may have
	// stopped before necking, so R_m and A_g are lower bounds.
	AtEnd bool `json:"at_end"`
}

// UltimateStrength returns the maximum stress, the first point where it is
// reached, and the total and plastic strain there (plastic strain uses E
// when E > 0).
func UltimateStrength(strain, stress []float64, E float64) (Ultimate, error) {
	if err := sameLen("ultimate", len(strain), len(stress)); err != nil {
		return Ultimate{}, err
	}
	best := -1
	for i := range stress {
		if math.IsNaN(stress[i]) || math.IsNaN(strain[i]) {
			continue
		}
		if best < 0 || stress[i] > stress[best] {
			best = i
		}
	}
	if best < 0 {
		return Ultimate{}, errors.New("ultimate: no finite points")
	}
	u := Ultimate{Stress: stress[best], Index: best, StrainAtMax: strain[best], AtEnd: best == len(stress)-1}
	if E > 0 {
		u.PlasticStrainAtMax = strain[best] - stress[best]/E
	}
	return u, nil
}

// RValue is the plastic strain ratio r = ε_w/ε_t of a sheet specimen, with
// true plastic width strain ε_w and thickness strain ε_t from volume
// constancy, ε_t = −(ε_l + ε_w) (ISO 10113, ASTM E517).
type RValue struct {
	R float64 `json:"r"`
	// Method is "regression" (r = −m/(1+m) from the slope m of ε_w against
	// ε_l over the range) or "point" (r from the last point in the range).
	Method string `json:"method"`
	// Lo and Hi are the requested axial engineering strain range.
	Lo float64 `json:"strain_lo"`
	Hi float64 `json:"strain_hi"`
	// Fit is the regression of plastic true width strain against plastic
	// true length strain (regression method only).
	Fit *Fit `json:"fit,omitempty"`
	// ElasticRemoved says whether elastic strains were removed using E, ν.
	ElasticRemoved bool `json:"elastic_removed"`
}

// PlasticStrains converts axial and width engineering strains to true
// plastic strains. With E > 0 the elastic stretches 1 + σ/E (axial) and
// 1 − νσ/E (width) are removed multiplicatively, ε^p = ln λ − ln λ^e
// (common practice for small elastic strains); with E = 0 the total true
// strains are returned.
func PlasticStrains(axial, width, stress []float64, E, nu float64) (el, ew []float64) {
	el = make([]float64, len(axial))
	ew = make([]float64, len(axial))
	for i := range axial {
		el[i] = math.Log1p(axial[i])
		ew[i] = math.Log1p(width[i])
		if E > 0 {
			s := stress[i] / E
			el[i] -= math.Log1p(s)
			ew[i] -= math.Log1p(-nu * s)
		}
	}
	return el, ew
}

// RRatio returns r = ε_w/ε_t for one point of true plastic length and width
// strain, with ε_t = −(ε_l + ε_w) (ISO 10113).
func RRatio(el, ew float64) float64 { return ew / -(el + ew) }

// PlasticStrainRatio computes r over the points whose axial engineering
// strain lies in [lo, hi]. axial and width are engineering strains,
// stress the engineering stress; E and ν (if E > 0) remove the elastic
// part. With at least three points in range it uses the regression method:
// the slope m of ε_w against ε_l gives r = −m/(1+m) (ISO 10113, regression
// form from memory); with fewer it returns the point value at the last
// point in range.
func PlasticStrainRatio(axial, width, stress []float64, E, nu, lo, hi float64) (RValue, error) {
	if err := errors.Join(sameLen("r value", len(axial), len(width), len(stress)), checkRange("r value strain", lo, hi)); err != nil {
		return RValue{}, err
	}
	el, ew := PlasticStrains(axial, width, stress, E, nu)
	xs, ys := inRange(axial, el, ew, lo, hi)
	rv := RValue{Lo: lo, Hi: hi, ElasticRemoved: E > 0}
	switch {
	case len(xs) == 0:
		return RValue{}, fmt.Errorf("r value: no points with axial strain in [%g, %g]", lo, hi)
	case len(xs) < 3:
		l, w := xs[len(xs)-1], ys[len(ys)-1]
		if l+w == 0 {
			return RValue{}, errors.New("r value: thickness strain is zero at the chosen point")
		}
		rv.R, rv.Method = RRatio(l, w), "point"
	default:
		f, err := FitLine(xs, ys)
		if err != nil {
			return RValue{}, fmt.Errorf("r value: %w", err)
		}
		if f.Slope == -1 {
			return RValue{}, errors.New("r value: width strain equals minus length strain (no thickness change)")
		}
		rv.R, rv.Method, rv.Fit = -f.Slope/(1+f.Slope), "regression", &f
	}
	if math.IsNaN(rv.R) || math.IsInf(rv.R, 0) {
		return RValue{}, fmt.Errorf("r value over [%g, %g] is not finite", lo, hi)
	}
	return rv, nil
}

package kinematics

import (
	"errors"
	"fmt"
	"math"
)

// Scale converts lengths from pixels to millimetres: it is the size of one
// pixel in mm. The zero Scale means "no calibration": lengths stay in px.
// Strains and rotations are dimensionless and never scaled.
type Scale float64

// ScaleFromPoints returns the Scale given by two reference-image points a and
// b (pixel coordinates) that lie distance mm apart on the specimen.
func ScaleFromPoints(a, b [2]float64, distance float64) (Scale, error) {
	var errs []error
	for _, c := range [4]float64{a[0], a[1], b[0], b[1]} {
		if math.IsNaN(c) || math.IsInf(c, 0) {
			errs = append(errs, fmt.Errorf("scale points %v and %v: want finite pixel coordinates", a, b))
			break
		}
	}
	if !(distance > 0) || math.IsInf(distance, 0) {
		errs = append(errs, fmt.Errorf("scale distance %v mm: want a positive, finite length", distance))
	}
	px := math.Hypot(b[0]-a[0], b[1]-a[1])
	if len(errs) == 0 && px < 1 {
		errs = append(errs, fmt.Errorf("scale points %v and %v are %.3g px apart: want points at least 1 px (preferably hundreds) apart", a, b, px))
	}
	if err := errors.Join(errs...); err != nil {
		return 0, err
	}
	return Scale(distance / px), nil
}

// Validate returns an error unless s is zero (uncalibrated) or positive and finite.
func (s Scale) Validate() error {
	if s < 0 || math.IsNaN(float64(s)) || math.IsInf(float64(s), 0) {
		return fmt.Errorf("scale %v mm/px: want a positive, finite value, or 0 for results in px", float64(s))
	}
	return nil
}

// Length returns a length of px pixels in the unit of [Scale.Unit]: mm when
// s is set, px when s is zero.
func (s Scale) Length(px float64) float64 {
	if s == 0 {
		return px
	}
	return px * float64(s)
}

// Unit returns "mm" when s is set and "px" when it is zero.
func (s Scale) Unit() string {
	if s == 0 {
		return "px"
	}
	return "mm"
}

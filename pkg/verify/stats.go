package verify

import (
	"fmt"
	"math"
)

// Disp is a measured displacement at one point, in px.
type Disp struct {
	U, V float64
	OK   bool // false: the method gave no result at this point
}

// ErrorStats summarises measured displacements against reference values
// (the exact truth, or another method), over the points where the measured
// value is OK.
type ErrorStats struct {
	N      int     // points compared
	Failed int     // points without a result (not OK)
	MeanU  float64 // mean error of u (systematic part), px
	MeanV  float64 // mean error of v, px
	RMS    float64 // root mean square of the error vector length, px
	Max    float64 // largest error vector length, px
}

// Errors compares got with want point by point. Points where got is not OK
// count in Failed and nowhere else. It returns an error if the lengths differ.
func Errors(got []Disp, want [][2]float64) (ErrorStats, error) {
	if len(got) != len(want) {
		return ErrorStats{}, fmt.Errorf("compare: %d measured points but %d reference values", len(got), len(want))
	}
	var s ErrorStats
	var sum2 float64
	for i, g := range got {
		if !g.OK || math.IsNaN(g.U) || math.IsNaN(g.V) {
			s.Failed++
			continue
		}
		du, dv := g.U-want[i][0], g.V-want[i][1]
		s.N++
		s.MeanU += du
		s.MeanV += dv
		e2 := du*du + dv*dv
		sum2 += e2
		s.Max = math.Max(s.Max, math.Sqrt(e2))
	}
	if s.N > 0 {
		s.MeanU /= float64(s.N)
		s.MeanV /= float64(s.N)
		s.RMS = math.Sqrt(sum2 / float64(s.N))
	}
	return s, nil
}

// Agreement compares two methods on the points where both gave a result.
func Agreement(a, b []Disp) (ErrorStats, error) {
	if len(a) != len(b) {
		return ErrorStats{}, fmt.Errorf("agreement: %d and %d points", len(a), len(b))
	}
	aa := make([]Disp, 0, len(a))
	bb := make([][2]float64, 0, len(b))
	failed := 0
	for i := range a {
		if !a[i].OK || !b[i].OK {
			failed++
			continue
		}
		aa = append(aa, a[i])
		bb = append(bb, [2]float64{b[i].U, b[i].V})
	}
	s, err := Errors(aa, bb)
	s.Failed = failed
	return s, err
}

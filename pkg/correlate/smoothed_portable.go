//go:build !(goexperiment.simd && amd64)

package correlate

// smoothedVarsFast is the smoothedVars factor uses (see smoothed_simd.go).
func (s *solver) smoothedVarsFast(cu, cv *[12]float64) (vu, vv float64) {
	return s.smoothedVars(cu, cv)
}

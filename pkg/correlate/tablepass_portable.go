//go:build !(goexperiment.simd && amd64)

package correlate

// vectorPass reports whether this build and CPU use a vector pass: not in
// builds without GOEXPERIMENT=simd (see tablepass_simd.go).
const vectorPass = false

// rowsDefault reports whether Run tabulates the deformed image as a row
// table (spline.RowTable, pass1r and pass2r) rather than the bicubic
// table (spline.Table, pass1t and pass2t). Not in this build: the row
// passes take some 10 more flops per sample (hot 1.34× first order, 1.22×
// second), and in a run that cancels what the smaller table saves
// (whole-run CPU per point 0.95× first order, 1.10× second, one thread).
const rowsDefault = false

// pass1fast is the first-order table pass Run uses.
func (s *solver) pass1fast(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	if s.rowTabled() {
		return s.pass1rows(p, sg, sgg, sfg, sjg)
	}
	return s.pass1t(p, sg, sgg, sfg, sjg)
}

func (s *solver) initVector() {}

// prepare1fast is the first-order grid-point prepare Run uses.
func (s *solver) prepare1fast(ix, iy int) Status {
	if s.mom != nil {
		if p := s.mom.at1(ix, iy); p != nil {
			return s.prepare1m(ix, iy, p)
		}
	}
	return s.prepare1(ix, iy)
}

// pass2fast is the second-order table pass Run uses.
func (s *solver) pass2fast(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	if s.rowTabled() {
		return s.pass2rows(p, sg, sgg, sfg, sjg)
	}
	return s.pass2t(p, sg, sgg, sfg, sjg)
}

// prepare2fast is the second-order grid-point prepare Run uses.
func (s *solver) prepare2fast(ix, iy int) Status {
	if s.mom != nil {
		if p := s.mom.at(ix, iy); p != nil {
			return s.prepare2m(ix, iy, p)
		}
	}
	return s.prepare2(ix, iy)
}

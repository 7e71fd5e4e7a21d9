package correlate

import (
	"unsafe"

	"github.com/mottledic/mottle/pkg/spline"
)

// The IC-GN passes on the quintic row table (spline.QuinticRowTable), in
// the manner of pass1r and pass2r: per sample the six row polynomials of
// rows y−2 … y+3 by Horner's rule in tx, then their combination in ty by
// the quintic B-spline basis (spline.EvalRows5), all in float32 with the
// same operations in the same order.

// rowTabled reports whether the solver interpolates from a row table
// (cubic or quintic).
func (s *solver) rowTabled() bool { return s.rtab != nil || s.qtab != nil }

// pass1rows is the first-order pass on the solver's row table.
func (s *solver) pass1rows(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	if s.qtab != nil {
		return s.pass1q(p, sg, sgg, sfg, sjg)
	}
	return s.pass1r(p, sg, sgg, sfg, sjg)
}

// pass2rows is the second-order pass on the solver's row table.
func (s *solver) pass2rows(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	if s.qtab != nil {
		return s.pass2q(p, sg, sgg, sfg, sjg)
	}
	return s.pass2r(p, sg, sgg, sfg, sjg)
}

// pass1q is pass1r on the quintic row table.
func (s *solver) pass1q(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	return s.pass1on(s.qtab.Coefficients(), s.qtab.W, 6, segRows5, p, sg, sgg, sfg, sjg)
}

// segRows5 is segRows on the quintic row table: per sample the six row
// polynomials at tx and their combination at ty, as spline.EvalRows5.
//
//go:noinline
func segRows5(base unsafe.Pointer, o, step, rs int, tx, ty, drx, dry int64, fmean float64, g []float64) {
	for i := range g {
		t, u := float32(tx)*fixScale, float32(ty)*fixScale
		c0 := (*[6]float32)(unsafe.Add(base, 4*o))
		c1 := (*[6]float32)(unsafe.Add(base, 4*(o+rs)))
		c2 := (*[6]float32)(unsafe.Add(base, 4*(o+2*rs)))
		c3 := (*[6]float32)(unsafe.Add(base, 4*(o+3*rs)))
		c4 := (*[6]float32)(unsafe.Add(base, 4*(o+4*rs)))
		c5 := (*[6]float32)(unsafe.Add(base, 4*(o+5*rs)))
		v0 := c0[0] + t*(c0[1]+t*(c0[2]+t*(c0[3]+t*(c0[4]+t*c0[5]))))
		v1 := c1[0] + t*(c1[1]+t*(c1[2]+t*(c1[3]+t*(c1[4]+t*c1[5]))))
		v2 := c2[0] + t*(c2[1]+t*(c2[2]+t*(c2[3]+t*(c2[4]+t*c2[5]))))
		v3 := c3[0] + t*(c3[1]+t*(c3[2]+t*(c3[3]+t*(c3[4]+t*c3[5]))))
		v4 := c4[0] + t*(c4[1]+t*(c4[2]+t*(c4[3]+t*(c4[4]+t*c4[5]))))
		v5 := c5[0] + t*(c5[1]+t*(c5[2]+t*(c5[3]+t*(c5[4]+t*c5[5]))))
		// The B-spline combination in ty (spline.EvalRows5).
		s04, d04 := v0+v4, v4-v0
		s13, d13 := v1+v3, v3-v1
		e0 := s04 + 26*s13 + 66*v2
		e1 := 5*d04 + 50*d13
		e2 := 10*s04 + 20*s13 - 60*v2
		e3 := 10*d04 - 20*d13
		e4 := 5*s04 - 20*s13 + 30*v2
		e5 := (v5 - v0) + 5*(v1-v4) + 10*(v3-v2)
		g[i] = float64(e0+u*(e1+u*(e2+u*(e3+u*(e4+u*e5))))) - fmean
		tx += drx
		ty += dry
		o += step
	}
}

// pass2q is pass2r on the quintic row table.
func (s *solver) pass2q(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	return s.pass2on(s.qtab.Coefficients(), s.qtab.W, row2q, p, sg, sgg, sfg, sjg)
}

// row2q is row2r on the quintic row table.
//
//go:noinline
func row2q(base unsafe.Pointer, w int, x, y, dx, dy, ddx, ddy int64, fmean float64, g []float64) {
	rs := 6 * w
	for i := range g {
		t := float32(x&fixMask) * fixScale
		u := float32(y&fixMask) * fixScale
		o := 6 * (int(y>>fixBits)*w + int(x>>fixBits))
		c0 := (*[6]float32)(unsafe.Add(base, 4*o))
		c1 := (*[6]float32)(unsafe.Add(base, 4*(o+rs)))
		c2 := (*[6]float32)(unsafe.Add(base, 4*(o+2*rs)))
		c3 := (*[6]float32)(unsafe.Add(base, 4*(o+3*rs)))
		c4 := (*[6]float32)(unsafe.Add(base, 4*(o+4*rs)))
		c5 := (*[6]float32)(unsafe.Add(base, 4*(o+5*rs)))
		v0 := c0[0] + t*(c0[1]+t*(c0[2]+t*(c0[3]+t*(c0[4]+t*c0[5]))))
		v1 := c1[0] + t*(c1[1]+t*(c1[2]+t*(c1[3]+t*(c1[4]+t*c1[5]))))
		v2 := c2[0] + t*(c2[1]+t*(c2[2]+t*(c2[3]+t*(c2[4]+t*c2[5]))))
		v3 := c3[0] + t*(c3[1]+t*(c3[2]+t*(c3[3]+t*(c3[4]+t*c3[5]))))
		v4 := c4[0] + t*(c4[1]+t*(c4[2]+t*(c4[3]+t*(c4[4]+t*c4[5]))))
		v5 := c5[0] + t*(c5[1]+t*(c5[2]+t*(c5[3]+t*(c5[4]+t*c5[5]))))
		// The B-spline combination in ty (spline.EvalRows5).
		s04, d04 := v0+v4, v4-v0
		s13, d13 := v1+v3, v3-v1
		e0 := s04 + 26*s13 + 66*v2
		e1 := 5*d04 + 50*d13
		e2 := 10*s04 + 20*s13 - 60*v2
		e3 := 10*d04 - 20*d13
		e4 := 5*s04 - 20*s13 + 30*v2
		e5 := (v5 - v0) + 5*(v1-v4) + 10*(v3-v2)
		g[i] = float64(e0+u*(e1+u*(e2+u*(e3+u*(e4+u*e5))))) - fmean
		x += dx
		y += dy
		dx += ddx
		dy += ddy
	}
}

// defTable is a table of the deformed image's spline: a spline.Table,
// spline.RowTable or spline.QuinticRowTable, filled in parts of rows.
type defTable interface {
	FillRows(s *spline.Image, y0, y1 int)
}

// allocTable allocates the deformed image's table for the run's spline
// order and tuning: the quintic row table for a quintic spline; for a
// cubic one the row table or the bicubic table (tuning.rows).
func (r *run) allocTable(w, h int) defTable {
	switch {
	case r.opt.Interp == spline.Quintic:
		return spline.AllocQuinticRowTable(w, h)
	case r.tun.rows():
		return spline.AllocRowTable(w, h)
	}
	return spline.AllocTable(w, h)
}

// useDefTable makes the solver interpolate the deformed image from t.
func (s *solver) useDefTable(t defTable) {
	switch t := t.(type) {
	case *spline.Table:
		s.useTable(t)
	case *spline.RowTable:
		s.useRowTable(t)
	case *spline.QuinticRowTable:
		s.useQuinticRowTable(t)
	default:
		panic("correlate: useDefTable: not a table")
	}
}

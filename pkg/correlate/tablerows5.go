package correlate

import (
	"math"
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
	m := s.m
	fm := float64(m)
	a11, a12, a21, a22 := 1+p[Ux], p[Uy], p[Vx], 1+p[Vy]
	cx, cy := s.xc+p[U], s.yc+p[V]
	// The warp is affine: the corners bound the warped subset, and inside
	// the usable area every table read below is in bounds.
	for _, c := range [4][2]float64{{-fm, -fm}, {fm, -fm}, {-fm, fm}, {fm, fm}} {
		x := cx + a11*c[0] + a12*c[1]
		y := cy + a21*c[0] + a22*c[1]
		if !(x >= s.lo && x <= s.defW && y >= s.lo && y <= s.defH) {
			return false
		}
	}
	side := 2*m + 1
	tab := s.qtab.Coefficients()
	w := s.qtab.W
	rs := 6 * w // from one coefficient row to the next
	base := unsafe.Pointer(&tab[0])
	var tg, tgg, tfg, tx0, tx1, tx2, ty0, ty1, ty2 float64
	fmean := s.fmean
	dx, dy := int64(math.Round(a11*fixOne)), int64(math.Round(a21*fixOne))
	nx, ny := (dx+fixOne/2)>>fixBits, (dy+fixOne/2)>>fixBits
	rx, ry := dx-nx<<fixBits, dy-ny<<fixBits
	step := 6 * (int(ny)*w + int(nx))
	m1 := fm + 1
	k := 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		x := fix(cx - a11*fm + a12*eta)
		y := fix(cy - a21*fm + a22*eta)
		g := s.gbuf[:side]
		for i := 0; i < len(g); {
			fxr, fyr := x&fixMask, y&fixMask
			n := min(min(segLen(fxr, rx), segLen(fyr, ry))+1, len(g)-i)
			o := 6 * (int(y>>fixBits)*w + int(x>>fixBits))
			segRows5(base, o, step, rs, fxr, fyr, rx, ry, fmean, g[i:i+n])
			i += n
			x += int64(n) * dx
			y += int64(n) * dy
		}
		var a0, a1, b0, b1 float64
		tg, tgg, tfg, a0, a1, b0, b1 = s.rowSums(k, tg, tgg, tfg)
		rx1, ry1 := m1*a0-a1, m1*b0-b1 // Σaξ, Σbξ
		tx0 += a0
		tx1 += rx1
		tx2 += a0 * eta
		ty0 += b0
		ty1 += ry1
		ty2 += b0 * eta
		k += side
	}
	*sg, *sgg, *sfg = tg, tgg, tfg
	sjg[U], sjg[Ux], sjg[Uy] = tx0, tx1, tx2
	sjg[V], sjg[Vx], sjg[Vy] = ty0, ty1, ty2
	return true
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
	m := s.m
	fm := float64(m)
	side := 2*m + 1
	tab := s.qtab.Coefficients()
	base := unsafe.Pointer(&tab[0])
	w := s.qtab.W
	lo, hx, hy := fix(s.lo), fix(s.defW), fix(s.defH)
	var tg, tgg, tfg float64
	var acc [12]float64
	fmean := s.fmean
	ddx, ddy := int64(math.Round(p[Uxx]*fixOne)), int64(math.Round(p[Vxx]*fixOne))
	m1, m3, mm := fm+1, 2*fm+3, (fm+1)*(fm+2)
	k := 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		du, dv := Displacement(p, -fm, eta)
		xf, yf := s.xc-fm+du, s.yc+eta+dv
		if !(xf >= s.lo && yf >= s.lo) { // also keeps fix's argument ≥ 0
			return false
		}
		x, y := fix(xf), fix(yf)
		dx := int64(math.Round((1 + p[Ux] + p[Uxx]*(0.5-fm) + p[Uxy]*eta) * fixOne))
		dy := int64(math.Round((p[Vx] + p[Vxx]*(0.5-fm) + p[Vxy]*eta) * fixOne))
		f := s.f[k : k+side]
		fx := s.fx[k : k+side]
		fy := s.fy[k : k+side]
		fx, fy, g := fx[:len(f)], fy[:len(f)], s.gbuf[:len(f)]
		// Every position of the row inside the usable area, which lies
		// inside the image: the table reads of row2q are in bounds.
		if !rowInside(x, dx, ddx, side, lo, hx) || !rowInside(y, dy, ddy, side, lo, hy) {
			return false
		}
		row2q(base, w, x, y, dx, dy, ddx, ddy, fmean, g)
		var a0, a1, a2, b0, b1, b2 float64
		for i, v := range g {
			tg += v
			tgg += v * v
			tfg += f[i] * v
			a0 += fx[i] * v
			a1 += a0
			a2 += a1
			b0 += fy[i] * v
			b1 += b0
			b2 += b1
		}
		rx1, ry1 := m1*a0-a1, m1*b0-b1                   // Σaξ, Σbξ
		rx2, ry2 := 2*a2-mm*a0+m3*rx1, 2*b2-mm*b0+m3*ry1 // Σaξ², Σbξ²
		acc[U] += a0
		acc[Ux] += rx1
		acc[Uy] += a0 * eta
		acc[Uxx] += rx2 / 2
		acc[Uxy] += rx1 * eta
		acc[Uyy] += a0 * eta * eta / 2
		acc[V] += b0
		acc[Vx] += ry1
		acc[Vy] += b0 * eta
		acc[Vxx] += ry2 / 2
		acc[Vxy] += ry1 * eta
		acc[Vyy] += b0 * eta * eta / 2
		k += side
	}
	*sg, *sgg, *sfg = tg, tgg, tfg
	*sjg = acc
	return true
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

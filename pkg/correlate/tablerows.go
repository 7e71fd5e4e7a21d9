package correlate

import (
	"math"
	"unsafe"
)

// pass1r is pass1t for a solver with a row table (spline.RowTable): the
// same segments along each subset row, the same fixed-point offsets, and
// per sample the four row polynomials of rows y−1 … y+2 by Horner's rule in
// tx, combined in ty by the cubic B-spline basis (spline.EvalRows).
func (s *solver) pass1r(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	return s.pass1on(s.rtab.Coefficients(), s.rtab.W, 4, segRows, p, sg, sgg, sfg, sjg)
}

// segFunc interpolates one segment of a subset row from a row table
// (segRows, segRows5).
type segFunc func(base unsafe.Pointer, o, step, rs int, tx, ty, drx, dry int64, fmean float64, g []float64)

// pass1on is the first-order pass on a row table tab of w cells a row and
// nc float32 per cell and coefficient row, whose segments seg interpolates.
func (s *solver) pass1on(tab []float32, w, nc int, seg segFunc, p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
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
	rs := nc * w // from one coefficient row to the next
	base := unsafe.Pointer(&tab[0])
	var tg, tgg, tfg, tx0, tx1, tx2, ty0, ty1, ty2 float64
	fmean := s.fmean
	dx, dy := int64(math.Round(a11*fixOne)), int64(math.Round(a21*fixOne))
	nx, ny := (dx+fixOne/2)>>fixBits, (dy+fixOne/2)>>fixBits
	rx, ry := dx-nx<<fixBits, dy-ny<<fixBits
	step := nc * (int(ny)*w + int(nx))
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
			o := nc * (int(y>>fixBits)*w + int(x>>fixBits))
			seg(base, o, step, rs, fxr, fyr, rx, ry, fmean, g[i:i+n])
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

// segRows interpolates the len(g) samples of one segment of a subset row
// from a row table (pass1r): the first at the cell whose row polynomials
// start at table index o with offsets (tx, ty), each next one step
// indices and (drx, dry) further on; g gets the values less fmean. base is
// the table's first element and rs the distance between its rows. It is a
// function of its own so that its loop has the registers to itself.
//
//go:noinline
func segRows(base unsafe.Pointer, o, step, rs int, tx, ty, drx, dry int64, fmean float64, g []float64) {
	for i := range g {
		t, u := float32(tx)*fixScale, float32(ty)*fixScale
		c0 := (*[4]float32)(unsafe.Add(base, 4*o))
		c1 := (*[4]float32)(unsafe.Add(base, 4*(o+rs)))
		c2 := (*[4]float32)(unsafe.Add(base, 4*(o+2*rs)))
		c3 := (*[4]float32)(unsafe.Add(base, 4*(o+3*rs)))
		v0 := c0[0] + t*(c0[1]+t*(c0[2]+t*c0[3]))
		v1 := c1[0] + t*(c1[1]+t*(c1[2]+t*c1[3]))
		v2 := c2[0] + t*(c2[1]+t*(c2[2]+t*c2[3]))
		v3 := c3[0] + t*(c3[1]+t*(c3[2]+t*c3[3]))
		// The B-spline combination in ty (spline.EvalRows).
		s02 := v0 + v2
		b := v1 + v1
		e0 := s02 + (b + b)
		e1 := 3 * (v2 - v0)
		e2 := 3 * (s02 - b)
		e3 := (v3 - v0) + 3*(v1-v2)
		g[i] = float64(e0+u*(e1+u*(e2+u*e3))) - fmean
		tx += drx
		ty += dry
		o += step
	}
}

// pass2r is pass2t for a solver with a row table: the same fixed-point
// positions (first differences growing by Uxx and Vxx per pixel along a
// row), each sample evaluated as in spline.EvalRows.
func (s *solver) pass2r(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	return s.pass2on(s.rtab.Coefficients(), s.rtab.W, row2r, p, sg, sgg, sfg, sjg)
}

// rowFunc interpolates one subset row of a second-order pass from a row
// table (row2r, row2q).
type rowFunc func(base unsafe.Pointer, w int, x, y, dx, dy, ddx, ddy int64, fmean float64, g []float64)

// pass2on is the second-order pass on a row table tab of w cells a row,
// whose subset rows row interpolates.
func (s *solver) pass2on(tab []float32, w int, row rowFunc, p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	m := s.m
	fm := float64(m)
	side := 2*m + 1
	base := unsafe.Pointer(&tab[0])
	lo, hx, hy := fix(s.lo), fix(s.defW), fix(s.defH)
	var tg, tgg, tfg float64
	var acc [12]float64
	fmean := s.fmean
	ddx, ddy := int64(math.Round(p[Uxx]*fixOne)), int64(math.Round(p[Vxx]*fixOne))
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
		// Every position of the row inside the usable area, which lies
		// inside the image: the table reads of row are in bounds.
		if !rowInside(x, dx, ddx, side, lo, hx) || !rowInside(y, dy, ddy, side, lo, hy) {
			return false
		}
		row(base, w, x, y, dx, dy, ddx, ddy, fmean, s.gbuf[:side])
		tg, tgg, tfg = s.rowSums2t(k, eta, tg, tgg, tfg, &acc)
		k += side
	}
	*sg, *sgg, *sfg = tg, tgg, tfg
	*sjg = acc
	return true
}

// row2r interpolates one subset row of pass2r from the row table at base
// (w cells a row) into g, less fmean: the positions start at the fixed-point
// (x, y) and step by (dx, dy), which grow by (ddx, ddy) per pixel. The
// caller has checked that every position lies in the image. It is a
// function of its own so that its loop has the registers to itself.
//
//go:noinline
func row2r(base unsafe.Pointer, w int, x, y, dx, dy, ddx, ddy int64, fmean float64, g []float64) {
	rs := 4 * w
	for i := range g {
		t := float32(x&fixMask) * fixScale
		u := float32(y&fixMask) * fixScale
		o := 4 * (int(y>>fixBits)*w + int(x>>fixBits))
		c0 := (*[4]float32)(unsafe.Add(base, 4*o))
		c1 := (*[4]float32)(unsafe.Add(base, 4*(o+rs)))
		c2 := (*[4]float32)(unsafe.Add(base, 4*(o+2*rs)))
		c3 := (*[4]float32)(unsafe.Add(base, 4*(o+3*rs)))
		v0 := c0[0] + t*(c0[1]+t*(c0[2]+t*c0[3]))
		v1 := c1[0] + t*(c1[1]+t*(c1[2]+t*c1[3]))
		v2 := c2[0] + t*(c2[1]+t*(c2[2]+t*c2[3]))
		v3 := c3[0] + t*(c3[1]+t*(c3[2]+t*c3[3]))
		s02 := v0 + v2
		b := v1 + v1
		e0 := s02 + (b + b)
		e1 := 3 * (v2 - v0)
		e2 := 3 * (s02 - b)
		e3 := (v3 - v0) + 3*(v1-v2)
		g[i] = float64(e0+u*(e1+u*(e2+u*e3))) - fmean
		x += dx
		y += dy
		dx += ddx
		dy += ddy
	}
}

package correlate

import (
	"math"
	"unsafe"
)

// The IC-GN passes over the deformed subset when the deformed image is a
// coefficient table (spline.Table): no per-sample function calls or spline
// weights, warped coordinates advanced incrementally along each subset row
// (exact for the first-order warp, by second differences for the
// second-order one), the bicubic piece evaluated inline by Horner's rule in
// float32 (the table's precision), the sums kept in float64. Each pass
// interpolates a subset row into a buffer and then accumulates it, in two
// loops that each keep their variables in registers (one loop needs more
// than the 15 the compiler allocates, and spills). The moments in ξ of a
// row are running sums: after c₀ += a, c₁ += c₀, c₂ += c₁ over the row
// (ξ = −m … m), c₀ = Σa, c₁ = Σa·(m+1−ξ) and c₂ = Σa·(m+1−ξ)(m+2−ξ)/2, so
// Σaξ = (m+1)c₀ − c₁ and Σaξ² = 2c₂ − (m+1)(m+2)c₀ + (2m+3)Σaξ: additions
// in place of the multiplications by ξ, exact apart from rounding.

// Fixed-point coordinates: a warped position x is held as the integer
// round(x·2^fixBits), so that stepping along a subset row is an exact
// integer addition and the cell index and fractional offset are a shift
// and a mask. With 40 fractional bits the resolution is 9e-13 px, finer
// than the float32 offset the table is evaluated at, and positions up to
// 2^23 px fit.
const (
	fixBits  = 40
	fixOne   = 1 << fixBits
	fixMask  = fixOne - 1
	fixScale = float32(1.0 / fixOne)
)

// fix converts a coordinate x ≥ 0 to fixed point.
func fix(x float64) int64 { return int64(x*fixOne + 0.5) }

// segLen returns how many further steps of r (|r| < fixOne) keep the
// fractional part f (0 ≤ f < fixOne) of a fixed-point coordinate inside
// [0, fixOne), that is, in the same cell.
func segLen(f, r int64) int {
	switch {
	case r > 0:
		return int(min((fixOne-1-f)/r, math.MaxInt32))
	case r < 0:
		return int(min(f/-r, math.MaxInt32))
	}
	return math.MaxInt32
}

// rowInside reports whether the fixed-point positions x_i of a subset row
// of n pixels stay in [lo, hi], where x_0 = x and each step adds the first
// difference, which starts at dx and grows by ddx per step: x_i = x + i·dx
// + ddx·i(i−1)/2 exactly. The positions are a quadratic sequence, whose
// extremes are its ends and, if ddx ≠ 0, the first index with
// dx + i·ddx of the sign of ddx, ⌈−dx/ddx⌉; the truncated quotient and its
// neighbours cover it. Outside the range where the closed form cannot
// overflow it steps along the row as the pass does.
func rowInside(x, dx, ddx int64, n int, lo, hi int64) bool {
	if !(x >= lo && x <= hi) {
		return false
	}
	// With n ≤ 2¹², |dx| ≤ 2⁴⁷ and |ddx| ≤ 2³⁵ the closed form stays below
	// 2⁶² in magnitude (i·dx ≤ 2⁵⁹, ddx·i²/2 ≤ 2⁵⁸, |x| ≤ 2⁶⁰), bounds
	// that need no division (a subset row steps about 2⁴⁰ per pixel).
	const lim = 1 << 60
	nn := int64(n)
	if nn > 1<<12 || hi >= lim || lo <= -lim || dx > 1<<47 || dx < -(1<<47) || ddx > 1<<35 || ddx < -(1<<35) {
		for i := 0; i < n; i++ {
			if !(x >= lo && x <= hi) {
				return false
			}
			x += dx
			dx += ddx
		}
		return true
	}
	at := func(i int64) bool {
		v := x + i*dx + ddx*(i*(i-1)/2)
		return v >= lo && v <= hi
	}
	if !at(nn - 1) {
		return false
	}
	if ddx != 0 && nn > 2 {
		// The first differences dx + i·ddx (i = 0 … n−2) are linear in
		// i: if the first and the last have the same sign, or one is
		// zero, the sequence is monotone and its ends, checked, are its
		// extremes (no division, the usual case).
		if last := dx + (nn-2)*ddx; dx >= 0 && last >= 0 || dx <= 0 && last <= 0 {
			return true
		}
		q := -dx / ddx
		for i := max(q-1, 1); i <= min(q+1, nn-2); i++ {
			if !at(i) {
				return false
			}
		}
	}
	return true
}

// pass1t is pass1 for a solver with a table.
//
// Along a subset row the warped position advances by (a11, a21) per
// pixel. Written as a whole number of cells (nx, ny), the nearest, plus a
// fractional rest (rx, ry), each row falls into a few segments (usually
// one to three) in which every step moves to the cell nx, ny away and
// adds rx, ry to the fractional offsets. Inside a segment the cell index
// advances by a constant and the offsets by a float64 addition, which is
// exact (multiples of 2⁻⁴⁰ below 1 have at most 40 significant bits), so
// the offsets are the same numbers as the fixed-point ones and the sums
// the same as with the coordinates computed per pixel.
func (s *solver) pass1t(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	m := s.m
	fm := float64(m)
	a11, a12, a21, a22 := 1+p[Ux], p[Uy], p[Vx], 1+p[Vy]
	cx, cy := s.xc+p[U], s.yc+p[V]
	// The warp is affine: the corners bound the warped subset.
	for _, c := range [4][2]float64{{-fm, -fm}, {fm, -fm}, {-fm, fm}, {fm, fm}} {
		x := cx + a11*c[0] + a12*c[1]
		y := cy + a21*c[0] + a22*c[1]
		if !(x >= s.lo && x <= s.defW && y >= s.lo && y <= s.defH) {
			return false
		}
	}
	side := 2*m + 1
	tab := s.tab.Coefficients()
	w := s.tab.W
	var tg, tgg, tfg, tx0, tx1, tx2, ty0, ty1, ty2 float64
	fmean := s.fmean
	// Steps along a row in fixed point; the error of rounding them is
	// below 1e-12 px per step.
	dx, dy := int64(math.Round(a11*fixOne)), int64(math.Round(a21*fixOne))
	nx, ny := (dx+fixOne/2)>>fixBits, (dy+fixOne/2)>>fixBits
	rx, ry := dx-nx<<fixBits, dy-ny<<fixBits
	step := 16 * (int(ny)*w + int(nx))
	const unit = 1.0 / fixOne
	drx, dry := float64(rx)*unit, float64(ry)*unit
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
			o := 16 * (int(y>>fixBits)*w + int(x>>fixBits))
			tx, ty := float64(fxr)*unit, float64(fyr)*unit
			for e := i + n; i < e; i++ {
				c := (*[16]float32)(tab[o : o+16])
				t, u := float32(tx), float32(ty)
				// Horner in ty over the four rows, highest first, so
				// that only two row values are live at a time.
				r := c[12] + t*(c[13]+t*(c[14]+t*c[15]))
				q := c[8] + t*(c[9]+t*(c[10]+t*c[11]))
				r = q + u*r
				q = c[4] + t*(c[5]+t*(c[6]+t*c[7]))
				r = q + u*r
				q = c[0] + t*(c[1]+t*(c[2]+t*c[3]))
				g[i] = float64(q+u*r) - fmean
				tx += drx
				ty += dry
				o += step
			}
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

// rowSums accumulates the subset row starting at pixel k, whose
// interpolated values (less f̄) are in s.gbuf: it returns tg, tgg and tfg
// plus the row's Σg, Σg² and Σf̃g, and the running sums a0, a1 of fx·g and
// b0, b1 of fy·g. It is a function of its own so that its loop has the
// registers to itself: inlined in pass1t, the compiler kept the pass's
// constants in registers and the sums on the stack, a load and a
// store per sum and pixel.
//
//go:noinline
func (s *solver) rowSums(k int, tg, tgg, tfg float64) (_, _, _, a0, a1, b0, b1 float64) {
	g := s.gbuf
	f := s.f[k : k+len(g)]
	fx := s.fx[k : k+len(g)]
	fy := s.fy[k : k+len(g)]
	for i, v := range g {
		tg += v
		tgg += v * v
		tfg += f[i] * v
		a0 += fx[i] * v
		a1 += a0
		b0 += fy[i] * v
		b1 += b0
	}
	return tg, tgg, tfg, a0, a1, b0, b1
}

// pass2t is pass2 for a solver with a table. Along a subset row (η fixed)
// the warped x is a quadratic in ξ: its first difference grows by Uxx per
// pixel, and likewise for y with Vxx.
func (s *solver) pass2t(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	m := s.m
	fm := float64(m)
	side := 2*m + 1
	tab := s.tab.Coefficients()
	base := unsafe.Pointer(&tab[0])
	w := s.tab.W
	// The usable area in fixed point (fix rounds, so a position exactly on
	// the border stays inside).
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
		// First differences at ξ = −m: u(ξ+1) − u(ξ) = Ux + Uxx(ξ + ½) + Uxy η.
		dx := int64(math.Round((1 + p[Ux] + p[Uxx]*(0.5-fm) + p[Uxy]*eta) * fixOne))
		dy := int64(math.Round((p[Vx] + p[Vxx]*(0.5-fm) + p[Vxy]*eta) * fixOne))
		g := s.gbuf[:side]
		// Every position of the row inside the usable area, which lies
		// inside the table: the reads of row2t are in bounds.
		if !rowInside(x, dx, ddx, side, lo, hx) || !rowInside(y, dy, ddy, side, lo, hy) {
			return false
		}
		row2t(base, w, x, y, dx, dy, ddx, ddy, fmean, g)
		tg, tgg, tfg = s.rowSums2t(k, eta, tg, tgg, tfg, &acc)
		k += side
	}
	*sg, *sgg, *sfg = tg, tgg, tfg
	*sjg = acc
	return true
}

// row2t interpolates one subset row of pass2t from the bicubic table at
// base (w cells a row) into g, less fmean: the positions start at the
// fixed-point (x, y) and step by (dx, dy), which grow by (ddx, ddy) per
// pixel; the caller has checked that every position lies in the usable
// area. It is a function of its own, reading the table without bounds
// checks, so that its loop has the registers to itself: inlined in pass2t
// it kept the row's state on the stack (hot, one thread: 0.985 of the
// time per point; the same operations, so the same values).
//
//go:noinline
func row2t(base unsafe.Pointer, w int, x, y, dx, dy, ddx, ddy int64, fmean float64, g []float64) {
	for i := range g {
		tx := float32(x&fixMask) * fixScale
		ty := float32(y&fixMask) * fixScale
		c := (*[16]float32)(unsafe.Add(base, 64*(int(y>>fixBits)*w+int(x>>fixBits))))
		r := c[12] + tx*(c[13]+tx*(c[14]+tx*c[15]))
		q := c[8] + tx*(c[9]+tx*(c[10]+tx*c[11]))
		r = q + ty*r
		q = c[4] + tx*(c[5]+tx*(c[6]+tx*c[7]))
		r = q + ty*r
		q = c[0] + tx*(c[1]+tx*(c[2]+tx*c[3]))
		g[i] = float64(q+ty*r) - fmean
		x += dx
		y += dy
		dx += ddx
		dy += ddy
	}
}

// rowSums2t accumulates the subset row of a second-order table pass
// (pass2t, pass2on) that starts at pixel k, in row η = eta, whose
// interpolated values (less f̄) are in s.gbuf: it returns tg, tgg and tfg
// and adds the row's terms of the twelve steepest-descent sums to acc. The
// moments in ξ are the running sums of rowSums, one order further:
// Σaξ² = 2c₂ − (m+1)(m+2)c₀ + (2m+3)Σaξ.
func (s *solver) rowSums2t(k int, eta, tg, tgg, tfg float64, acc *[12]float64) (_, _, _ float64) {
	fm := float64(s.m)
	m1, m3, mm := fm+1, 2*fm+3, (fm+1)*(fm+2)
	g := s.gbuf[:2*s.m+1]
	f := s.f[k : k+len(g)]
	fx := s.fx[k : k+len(g)]
	fy := s.fy[k : k+len(g)]
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
	return tg, tgg, tfg
}

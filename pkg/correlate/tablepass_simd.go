//go:build goexperiment.simd && amd64

package correlate

import (
	"math"
	"simd/archsimd"
)

// The first-order table pass with vector instructions (GOEXPERIMENT=simd,
// simd/archsimd; used when the CPU has AVX-512 and FMA, the portable pass1t
// otherwise). Four pixels of a subset row at a time: each cell's bicubic is
// evaluated by Horner's rule in ty on its four coefficient rows, the four
// results are transposed and finished by Horner's rule in tx across the
// four pixels, and the sums are kept in four float64 lanes. The fractional
// offsets are pass1t's (the same fixed-point coordinates); the sums differ
// from pass1t's by rounding only (fused multiply-adds, another order of
// evaluation and summation), which TestVectorPassMatchesPortable bounds.

// vectorPass reports whether this build and CPU use pass1v.
var vectorPass = archsimd.X86.AVX512() && archsimd.X86.FMA()

// pass1fast is the first-order table pass Run uses.
func (s *solver) pass1fast(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	if vectorPass && !s.portable {
		return s.pass1v(p, sg, sgg, sfg, sjg)
	}
	return s.pass1t(p, sg, sgg, sfg, sjg)
}

// cellRows evaluates the four rows of a cell's coefficients at ty (in
// every lane) by Horner's rule: lane i is Σ_j c[4j+i]·ty^j.
func cellRows(c []float32, ty archsimd.Float32x4) archsimd.Float32x4 {
	c = c[:16]
	r3 := archsimd.LoadFloat32x4((*[4]float32)(c[12:16]))
	r2 := archsimd.LoadFloat32x4((*[4]float32)(c[8:12]))
	r1 := archsimd.LoadFloat32x4((*[4]float32)(c[4:8]))
	r0 := archsimd.LoadFloat32x4((*[4]float32)(c[0:4]))
	return r3.MulAdd(ty, r2).MulAdd(ty, r1).MulAdd(ty, r0)
}

// initVector sets up the solver's scratch of pass1v.
func (s *solver) initVector() {
	side := 2*s.m + 1
	s.rowX = make([]int64, side)
	s.rowY = make([]int64, side)
	s.half4 = [4]float64{0.5, 0.5, 0.5, 0.5}
	s.scale4 = [4]float64{1.0 / fixOne, 1.0 / fixOne, 1.0 / fixOne, 1.0 / fixOne}
	s.rowDX = make([]int64, side)
	s.rowDY = make([]int64, side)
	s.etas = make([]float64, 4*side)
	s.etas2h = make([]float64, 4*side)
	for j := 0; j < side; j++ {
		for l := 0; l < 4; l++ {
			eta := float64(j - s.m)
			s.etas[4*j+l] = eta
			s.etas2h[4*j+l] = eta * eta / 2
		}
	}
	s.etas8 = make([]float64, 8*side)
	for j := 0; j < side; j++ {
		for l := 0; l < 8; l++ {
			s.etas8[8*j+l] = float64(j - s.m)
		}
	}
	for a := range s.rising8 {
		for k := range s.rising8[a] {
			for l := range s.rising8[a][k] {
				s.rising8[a][k][l] = s.fromRising[a][k]
			}
		}
	}
	cc := float64(s.m + 1)
	for l := 0; l < 8; l++ {
		s.cc8[0][l], s.cc8[1][l], s.cc8[2][l] = cc, 2*cc+1, cc*(cc+1)
		if side-8+l >= side&^7 {
			s.lastBits8 |= 1 << l
		}
		if s.n-8+l >= s.n&^7 {
			s.tailBits8 |= 1 << l
		}
	}
	nv, last := side&^3, side-4
	for l := range s.lastW {
		if last+l >= nv {
			s.lastW[l] = 1
		}
	}
}

// pass2fast is the second-order table pass Run uses.
func (s *solver) pass2fast(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	if vectorPass && !s.portable {
		return s.pass2v(p, sg, sgg, sfg, sjg)
	}
	return s.pass2t(p, sg, sgg, sfg, sjg)
}

// pass2v is pass2t with vector instructions, in the manner of pass1v: four
// pixels of a subset row at a time, each row interpolated by row2v and
// accumulated by acc2v. The fixed-point positions are pass2t's: along a
// row x advances by a first difference that grows by the constant second
// difference ddx, so pixel i of a group starting at x with first
// difference d is at x + i·d + i(i−1)/2·ddx, exact in integers. Every
// position is checked against the usable area in integer arithmetic
// before its cell is read, so pass2v reports false exactly when pass2t
// does. The row sums are added to the totals at the end of each row
// through memory.
func (s *solver) pass2v(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	m := s.m
	fm := float64(m)
	side := 2*m + 1
	if side < 4 {
		return s.pass2t(p, sg, sgg, sfg, sjg)
	}
	s.lim = [3]int64{fix(s.lo), fix(s.defW), fix(s.defH)}
	ddx, ddy := int64(math.Round(p[Uxx]*fixOne)), int64(math.Round(p[Vxx]*fixOne))
	// Scalar prologue: each row's fixed-point start and first differences
	// (pass2t's).
	rx, ry := s.rowX[:side], s.rowY[:side]
	rdx, rdy := s.rowDX[:side], s.rowDY[:side]
	for j := 0; j < side; j++ {
		eta := float64(j - m)
		du, dv := Displacement(p, -fm, eta)
		xf, yf := s.xc-fm+du, s.yc+eta+dv
		if !(xf >= s.lo && yf >= s.lo) {
			return false
		}
		rx[j], ry[j] = fix(xf), fix(yf)
		rdx[j] = int64(math.Round((1 + p[Ux] + p[Uxx]*(0.5-fm) + p[Uxy]*eta) * fixOne))
		rdy[j] = int64(math.Round((p[Vx] + p[Vxx]*(0.5-fm) + p[Vxy]*eta) * fixOne))
	}
	s.fmean4 = [4]float64{s.fmean, s.fmean, s.fmean, s.fmean}
	s.vout2 = [15][4]float64{}
	dd4 := &s.lanes
	dd4[0], dd4[1], dd4[2], dd4[3] = 0, 4*ddx, 8*ddx, 12*ddx
	dd4[4], dd4[5], dd4[6], dd4[7] = 0, 4*ddy, 8*ddy, 12*ddy
	k := 0
	for j := 0; j < side; j++ {
		if !s.row2v(rx[j], ry[j], rdx[j], rdy[j], ddx, ddy) {
			archsimd.ClearAVXUpperBits()
			return false
		}
		s.acc2v(k, j)
		k += side
	}
	archsimd.ClearAVXUpperBits()
	out := &s.vout2
	var sum [15]float64
	for q := range out {
		o := &out[q]
		sum[q] = (o[0] + o[1]) + (o[2] + o[3])
	}
	*sg, *sgg, *sfg = sum[0], sum[1], sum[2]
	sjg[U], sjg[Ux], sjg[Uy], sjg[Uxx], sjg[Uxy], sjg[Uyy] = sum[3], sum[4], sum[5], sum[6], sum[7], sum[8]
	sjg[V], sjg[Vx], sjg[Vy], sjg[Vxx], sjg[Vxy], sjg[Vyy] = sum[9], sum[10], sum[11], sum[12], sum[13], sum[14]
	return true
}

// row2v interpolates the second-order subset row starting at the
// fixed-point position (x0, y0) with first differences (dx0, dy0) and
// second differences (ddx, ddy) into s.gbuf, four pixels at a time, and
// reports whether every position lies in the usable area s.lim.
//
//go:noinline
func (s *solver) row2v(x0, y0, dx0, dy0, ddx, ddy int64) bool {
	g := s.gbuf[:2*s.m+1]
	last := len(g) - 4
	tab := s.tab.Coefficients()
	w := s.tab.W
	lo4 := archsimd.BroadcastInt64x4(s.lim[0])
	hx4, hy4 := archsimd.BroadcastInt64x4(s.lim[1]), archsimd.BroadcastInt64x4(s.lim[2])
	w4 := archsimd.BroadcastInt64x4(int64(w)).AsUint32x8()
	offs := &s.offs
	pos := &s.lanes2 // lane offsets from a group's first pixel
	dd4 := &s.lanes
	mask := archsimd.BroadcastInt64x4(fixMask)
	scale := archsimd.LoadFloat64x4(&s.scale4)
	ddx4 := archsimd.LoadInt64x4((*[4]int64)(dd4[0:4]))
	ddy4 := archsimd.LoadInt64x4((*[4]int64)(dd4[4:8]))
	x, y, dx, dy := x0, y0, dx0, dy0
	pos[0], pos[1], pos[2], pos[3] = 0, dx, 2*dx+ddx, 3*dx+3*ddx
	pos[4], pos[5], pos[6], pos[7] = 0, dy, 2*dy+ddy, 3*dy+3*ddy
	offx := archsimd.LoadInt64x4((*[4]int64)(pos[0:4]))
	offy := archsimd.LoadInt64x4((*[4]int64)(pos[4:8]))
	for i := 0; i < len(g); i += 4 {
		if i > last {
			// The last group overlaps the one before: restart it at
			// pixel last, from the closed form.
			i = last
			t := int64(i) * int64(i-1) / 2
			x, y = x0+int64(i)*dx0+t*ddx, y0+int64(i)*dy0+t*ddy
			dx, dy = dx0+int64(i)*ddx, dy0+int64(i)*ddy
			pos[0], pos[1], pos[2], pos[3] = 0, dx, 2*dx+ddx, 3*dx+3*ddx
			pos[4], pos[5], pos[6], pos[7] = 0, dy, 2*dy+ddy, 3*dy+3*ddy
			offx = archsimd.LoadInt64x4((*[4]int64)(pos[0:4]))
			offy = archsimd.LoadInt64x4((*[4]int64)(pos[4:8]))
		}
		xl := archsimd.BroadcastInt64x4(x).Add(offx)
		yl := archsimd.BroadcastInt64x4(y).Add(offy)
		if xl.Less(lo4).Or(xl.Greater(hx4)).Or(yl.Less(lo4)).Or(yl.Greater(hy4)).ToBits() != 0 {
			return false
		}
		offx, offy = offx.Add(ddx4), offy.Add(ddy4)
		txs := xl.And(mask).ConvertToFloat64().Mul(scale).ConvertToFloat32()
		tys := yl.And(mask).ConvertToFloat64().Mul(scale).ConvertToFloat32()
		// Cell offsets 16·(⌊y⌋·w + ⌊x⌋): inside the usable area ⌊y⌋ and
		// w fit in 32 bits.
		yl.ShiftAllRight(fixBits).AsUint32x8().MulEvenWiden(w4).AsInt64x4().
			Add(xl.ShiftAllRight(fixBits)).ShiftAllLeft(4).Store(offs)
		o0, o1, o2, o3 := int(offs[0]), int(offs[1]), int(offs[2]), int(offs[3])
		h0 := cell4(tab[o0:o0+16], tys.SelectFromPair(0, 0, 4, 4, tys))
		h1 := cell4(tab[o1:o1+16], tys.SelectFromPair(1, 1, 5, 5, tys))
		h2 := cell4(tab[o2:o2+16], tys.SelectFromPair(2, 2, 6, 6, tys))
		h3 := cell4(tab[o3:o3+16], tys.SelectFromPair(3, 3, 7, 7, tys))
		t0 := h0.SelectFromPair(0, 1, 4, 5, h1)
		t1 := h0.SelectFromPair(2, 3, 6, 7, h1)
		t2 := h2.SelectFromPair(0, 1, 4, 5, h3)
		t3 := h2.SelectFromPair(2, 3, 6, 7, h3)
		c0 := t0.SelectFromPair(0, 2, 4, 6, t2)
		c1 := t0.SelectFromPair(1, 3, 5, 7, t2)
		c2 := t1.SelectFromPair(0, 2, 4, 6, t3)
		c3 := t1.SelectFromPair(1, 3, 5, 7, t3)
		v := c3.MulAdd(txs, c2).MulAdd(txs, c1).MulAdd(txs, c0)
		v.ConvertToFloat64().Store((*[4]float64)(g[i : i+4]))
		x, y = x+4*dx+6*ddx, y+4*dy+6*ddy
		dx, dy = dx+4*ddx, dy+4*ddy
	}
	return true
}

// acc2v adds row j of the second-order subset (its pixels from k on,
// interpolated in s.gbuf) to the lane sums s.vout2 of pass2v: out[0..2]
// Σg, Σg², Σf̃g; out[3+q] for the parameters in the order U, Ux, Uy, Uxx,
// Uxy, Uyy, V, …, each Σ over rows of a row sum times 1, η, η²/2 or ½ (for
// ξ²/2).
//
//go:noinline
func (s *solver) acc2v(k, j int) {
	side := 2*s.m + 1
	g := s.gbuf[:side]
	f := s.f[k : k+side]
	fx, fy, xi := s.fx[k:k+side], s.fy[k:k+side], s.xis[:side]
	f, fx, fy, xi = f[:len(g)], fx[:len(g)], fy[:len(g)], xi[:len(g)]
	fmean4 := archsimd.LoadFloat64x4(&s.fmean4)
	var vg, vgg, vfg, rx0, rx1, rx2, ry0, ry1, ry2 archsimd.Float64x4
	i := 0
	for ; i+4 <= len(g); i += 4 {
		v := archsimd.LoadFloat64x4((*[4]float64)(g[i : i+4])).Sub(fmean4)
		vg = vg.Add(v)
		vgg = v.MulAdd(v, vgg)
		vfg = archsimd.LoadFloat64x4((*[4]float64)(f[i:i+4])).MulAdd(v, vfg)
		xv := archsimd.LoadFloat64x4((*[4]float64)(xi[i : i+4]))
		a := archsimd.LoadFloat64x4((*[4]float64)(fx[i : i+4])).Mul(v)
		ax := a.Mul(xv)
		rx0, rx1, rx2 = rx0.Add(a), rx1.Add(ax), ax.MulAdd(xv, rx2)
		b := archsimd.LoadFloat64x4((*[4]float64)(fy[i : i+4])).Mul(v)
		bx := b.Mul(xv)
		ry0, ry1, ry2 = ry0.Add(b), ry1.Add(bx), bx.MulAdd(xv, ry2)
	}
	if i < len(g) {
		// The last group overlaps the one before: its repeated pixels
		// are weighted by zero.
		i = len(g) - 4
		v := archsimd.LoadFloat64x4((*[4]float64)(g[i : i+4])).Sub(fmean4).Mul(archsimd.LoadFloat64x4(&s.lastW))
		vg = vg.Add(v)
		vgg = v.MulAdd(v, vgg)
		vfg = archsimd.LoadFloat64x4((*[4]float64)(f[i:i+4])).MulAdd(v, vfg)
		xv := archsimd.LoadFloat64x4((*[4]float64)(xi[i : i+4]))
		a := archsimd.LoadFloat64x4((*[4]float64)(fx[i : i+4])).Mul(v)
		ax := a.Mul(xv)
		rx0, rx1, rx2 = rx0.Add(a), rx1.Add(ax), ax.MulAdd(xv, rx2)
		b := archsimd.LoadFloat64x4((*[4]float64)(fy[i : i+4])).Mul(v)
		bx := b.Mul(xv)
		ry0, ry1, ry2 = ry0.Add(b), ry1.Add(bx), bx.MulAdd(xv, ry2)
	}
	e := archsimd.LoadFloat64x4((*[4]float64)(s.etas[4*j : 4*j+4]))
	e2 := archsimd.LoadFloat64x4((*[4]float64)(s.etas2h[4*j : 4*j+4]))
	half := archsimd.LoadFloat64x4(&s.half4)
	out := &s.vout2
	addTo(&out[0], vg)
	addTo(&out[1], vgg)
	addTo(&out[2], vfg)
	addTo(&out[3], rx0)
	addTo(&out[4], rx1)
	addMulTo(&out[5], rx0, e)
	addMulTo(&out[6], rx2, half)
	addMulTo(&out[7], rx1, e)
	addMulTo(&out[8], rx0, e2)
	addTo(&out[9], ry0)
	addTo(&out[10], ry1)
	addMulTo(&out[11], ry0, e)
	addMulTo(&out[12], ry2, half)
	addMulTo(&out[13], ry1, e)
	addMulTo(&out[14], ry0, e2)
}

// addTo adds x to *d.
func addTo(d *[4]float64, x archsimd.Float64x4) {
	archsimd.LoadFloat64x4(d).Add(x).Store(d)
}

// addMulTo adds x·y to *d.
func addMulTo(d *[4]float64, x, y archsimd.Float64x4) {
	x.MulAdd(y, archsimd.LoadFloat64x4(d)).Store(d)
}

// pass1v is pass1t with vector instructions. Each subset row is
// interpolated by row1v and accumulated by acc1v, two functions of their
// own, so that each loop has the registers to itself (inlined in one
// function, the integer state of the first loop spilled to the stack on
// every group of pixels). All scalar floating-point work is done before
// the first vector instruction or after ClearAVXUpperBits: legacy SSE
// instructions while the upper halves of the vector registers are in use
// are very slow on this hardware (the compiler also spills 128-bit vectors
// with legacy moves, so the values that stay live across the loops are
// 256-bit).
func (s *solver) pass1v(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	m := s.m
	fm := float64(m)
	side := 2*m + 1
	if side < 4 {
		return s.pass1t(p, sg, sgg, sfg, sjg)
	}
	a11, a12, a21, a22 := 1+p[Ux], p[Uy], p[Vx], 1+p[Vy]
	cx, cy := s.xc+p[U], s.yc+p[V]
	for _, c := range [4][2]float64{{-fm, -fm}, {fm, -fm}, {-fm, fm}, {fm, fm}} {
		x := cx + a11*c[0] + a12*c[1]
		y := cy + a21*c[0] + a22*c[1]
		if !(x >= s.lo && x <= s.defW && y >= s.lo && y <= s.defH) {
			return false
		}
	}
	rx, ry := s.rowX[:side], s.rowY[:side]
	for j := range rx {
		eta := float64(j - m)
		rx[j] = fix(cx - a11*fm + a12*eta)
		ry[j] = fix(cy - a21*fm + a22*eta)
	}
	dx, dy := int64(math.Round(a11*fixOne)), int64(math.Round(a21*fixOne))
	l := &s.lane1
	l[0], l[1], l[2], l[3] = 0, dx, 2*dx, 3*dx
	l[4], l[5], l[6], l[7] = 0, dy, 2*dy, 3*dy
	s.vout = [9][4]float64{}
	s.fmean4 = [4]float64{s.fmean, s.fmean, s.fmean, s.fmean}
	k := 0
	for j := 0; j < side; j++ {
		s.row1v(rx[j], ry[j], dx, dy)
		s.acc1v(k, j)
		k += side
	}
	archsimd.ClearAVXUpperBits()
	out := &s.vout
	var sum [9]float64
	for q := range out {
		sum[q] = (out[q][0] + out[q][1]) + (out[q][2] + out[q][3])
	}
	*sg, *sgg, *sfg = sum[0], sum[1], sum[2]
	sjg[U], sjg[Ux], sjg[Uy] = sum[3], sum[4], sum[5]
	sjg[V], sjg[Vx], sjg[Vy] = sum[6], sum[7], sum[8]
	return true
}

// row1v interpolates the subset row starting at the fixed-point position
// (x, y) and advancing by (dx, dy) per pixel into s.gbuf, four pixels at a
// time (the last group overlapping the one before unless the side is a
// multiple of four): each cell's bicubic is evaluated by Horner's rule in
// ty on its four coefficient rows, the four results are transposed and
// finished by Horner's rule in tx across the four pixels. The cells are
// addressed from the vector coordinates, and the frac·2⁻⁴⁰ of each lane is
// exact in float64, so rounding it to float32 gives pass1t's offsets.
//
//go:noinline
func (s *solver) row1v(x, y, dx, dy int64) {
	g := s.gbuf[:2*s.m+1]
	last := len(g) - 4
	tab := s.tab.Coefficients()
	w := s.tab.W
	offs := &s.offs
	mask := archsimd.BroadcastInt64x4(fixMask)
	scale := archsimd.LoadFloat64x4(&s.scale4)
	offx := archsimd.LoadInt64x4((*[4]int64)(s.lane1[0:4]))
	offy := archsimd.LoadInt64x4((*[4]int64)(s.lane1[4:8]))
	xl := archsimd.BroadcastInt64x4(x).Add(offx)
	yl := archsimd.BroadcastInt64x4(y).Add(offy)
	dx4, dy4 := archsimd.BroadcastInt64x4(4*dx), archsimd.BroadcastInt64x4(4*dy)
	w4 := archsimd.BroadcastInt64x4(int64(w)).AsUint32x8()
	for i := 0; i < len(g); i += 4 {
		if i > last {
			i = last
			xl = archsimd.BroadcastInt64x4(x + int64(i)*dx).Add(offx)
			yl = archsimd.BroadcastInt64x4(y + int64(i)*dy).Add(offy)
		}
		txs := xl.And(mask).ConvertToFloat64().Mul(scale).ConvertToFloat32()
		tys := yl.And(mask).ConvertToFloat64().Mul(scale).ConvertToFloat32()
		// Cell offsets 16·(⌊y⌋·w + ⌊x⌋): ⌊y⌋ and w fit in 32 bits.
		yl.ShiftAllRight(fixBits).AsUint32x8().MulEvenWiden(w4).AsInt64x4().
			Add(xl.ShiftAllRight(fixBits)).ShiftAllLeft(4).Store(offs)
		o0, o1, o2, o3 := int(offs[0]), int(offs[1]), int(offs[2]), int(offs[3])
		h0 := cell4(tab[o0:o0+16], tys.SelectFromPair(0, 0, 4, 4, tys))
		h1 := cell4(tab[o1:o1+16], tys.SelectFromPair(1, 1, 5, 5, tys))
		h2 := cell4(tab[o2:o2+16], tys.SelectFromPair(2, 2, 6, 6, tys))
		h3 := cell4(tab[o3:o3+16], tys.SelectFromPair(3, 3, 7, 7, tys))
		t0 := h0.SelectFromPair(0, 1, 4, 5, h1)
		t1 := h0.SelectFromPair(2, 3, 6, 7, h1)
		t2 := h2.SelectFromPair(0, 1, 4, 5, h3)
		t3 := h2.SelectFromPair(2, 3, 6, 7, h3)
		c0 := t0.SelectFromPair(0, 2, 4, 6, t2)
		c1 := t0.SelectFromPair(1, 3, 5, 7, t2)
		c2 := t1.SelectFromPair(0, 2, 4, 6, t3)
		c3 := t1.SelectFromPair(1, 3, 5, 7, t3)
		v := c3.MulAdd(txs, c2).MulAdd(txs, c1).MulAdd(txs, c0)
		v.ConvertToFloat64().Store((*[4]float64)(g[i : i+4]))
		xl, yl = xl.Add(dx4), yl.Add(dy4)
	}
}

// acc1v adds row j of the subset (its pixels from k on, interpolated in
// s.gbuf) to the lane sums s.vout of pass1v. The vectors are loaded
// through array pointers of slices of one length, so that the loop carries
// no bounds checks or pointer masks.
//
//go:noinline
func (s *solver) acc1v(k, j int) {
	side := 2*s.m + 1
	g := s.gbuf[:side]
	f := s.f[k : k+side]
	fx, fy, xi := s.fx[k:k+side], s.fy[k:k+side], s.xis[:side]
	f, fx, fy, xi = f[:len(g)], fx[:len(g)], fy[:len(g)], xi[:len(g)]
	fmean4 := archsimd.LoadFloat64x4(&s.fmean4)
	var vg, vgg, vfg, rx0, rx1, ry0, ry1 archsimd.Float64x4
	i := 0
	for ; i+4 <= len(g); i += 4 {
		v := archsimd.LoadFloat64x4((*[4]float64)(g[i : i+4])).Sub(fmean4)
		vg = vg.Add(v)
		vgg = v.MulAdd(v, vgg)
		vfg = archsimd.LoadFloat64x4((*[4]float64)(f[i:i+4])).MulAdd(v, vfg)
		a := archsimd.LoadFloat64x4((*[4]float64)(fx[i : i+4])).Mul(v)
		b := archsimd.LoadFloat64x4((*[4]float64)(fy[i : i+4])).Mul(v)
		xv := archsimd.LoadFloat64x4((*[4]float64)(xi[i : i+4]))
		rx0 = rx0.Add(a)
		rx1 = a.MulAdd(xv, rx1)
		ry0 = ry0.Add(b)
		ry1 = b.MulAdd(xv, ry1)
	}
	if i < len(g) {
		// The last group overlaps the one before: its repeated pixels
		// are weighted by zero.
		i = len(g) - 4
		v := archsimd.LoadFloat64x4((*[4]float64)(g[i : i+4])).Sub(fmean4).Mul(archsimd.LoadFloat64x4(&s.lastW))
		vg = vg.Add(v)
		vgg = v.MulAdd(v, vgg)
		vfg = archsimd.LoadFloat64x4((*[4]float64)(f[i:i+4])).MulAdd(v, vfg)
		a := archsimd.LoadFloat64x4((*[4]float64)(fx[i : i+4])).Mul(v)
		b := archsimd.LoadFloat64x4((*[4]float64)(fy[i : i+4])).Mul(v)
		xv := archsimd.LoadFloat64x4((*[4]float64)(xi[i : i+4]))
		rx0 = rx0.Add(a)
		rx1 = a.MulAdd(xv, rx1)
		ry0 = ry0.Add(b)
		ry1 = b.MulAdd(xv, ry1)
	}
	e := archsimd.LoadFloat64x4((*[4]float64)(s.etas[4*j : 4*j+4]))
	out := &s.vout
	addTo(&out[0], vg)
	addTo(&out[1], vgg)
	addTo(&out[2], vfg)
	addTo(&out[3], rx0)
	addTo(&out[4], rx1)
	addMulTo(&out[5], rx0, e)
	addTo(&out[6], ry0)
	addTo(&out[7], ry1)
	addMulTo(&out[8], ry0, e)
}

// cell4 is cellRows for a cell given as a slice of 16 coefficients,
// converted once to an array pointer (one bounds check).
func cell4(c []float32, ty archsimd.Float32x4) archsimd.Float32x4 {
	a := (*[16]float32)(c)
	r3 := archsimd.LoadFloat32x4((*[4]float32)(a[12:16]))
	r2 := archsimd.LoadFloat32x4((*[4]float32)(a[8:12]))
	r1 := archsimd.LoadFloat32x4((*[4]float32)(a[4:8]))
	r0 := archsimd.LoadFloat32x4((*[4]float32)(a[0:4]))
	return r3.MulAdd(ty, r2).MulAdd(ty, r1).MulAdd(ty, r0)
}

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

// pass1v is pass1t with vector instructions. All scalar floating-point
// work is done before the first vector instruction or after
// ClearAVXUpperBits: legacy SSE instructions while the upper halves of the
// vector registers are in use are very slow on this hardware (the
// compiler also spills 128-bit vectors with legacy moves, so the values
// that stay live across the loops are 256-bit).
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
	// Scalar prologue: fixed-point row starts and steps.
	rx, ry := s.rowX[:side], s.rowY[:side]
	for j := range rx {
		eta := float64(j - m)
		rx[j] = fix(cx - a11*fm + a12*eta)
		ry[j] = fix(cy - a21*fm + a22*eta)
	}
	dx, dy := int64(math.Round(a11*fixOne)), int64(math.Round(a21*fixOne))
	fmeanv := [4]float64{s.fmean, s.fmean, s.fmean, s.fmean}
	scalev := [4]float64{1.0 / fixOne, 1.0 / fixOne, 1.0 / fixOne, 1.0 / fixOne}
	last := side - 4 // the last group, overlapping the one before unless side%4 == 0
	tab := s.tab.Coefficients()
	w := s.tab.W
	etas := s.etas[:4*side]
	lastW := &s.lastW

	mask := archsimd.BroadcastInt64x4(fixMask)
	scale := archsimd.LoadFloat64x4(&scalev) // 256-bit: see below
	fmean4 := archsimd.LoadFloat64x4(&fmeanv)
	var vg, vgg, vfg, vx0, vx1, vx2, vy0, vy1, vy2 archsimd.Float64x4
	g := s.gbuf[:side]
	k := 0
	// Lane offsets of a group of four pixels, and the step between groups.
	offx := archsimd.LoadInt64x4(&[4]int64{0, dx, 2 * dx, 3 * dx})
	offy := archsimd.LoadInt64x4(&[4]int64{0, dy, 2 * dy, 3 * dy})
	dx4, dy4 := archsimd.BroadcastInt64x4(4*dx), archsimd.BroadcastInt64x4(4*dy)
	for j := 0; j < side; j++ {
		x, y := rx[j], ry[j]
		xl := archsimd.BroadcastInt64x4(x).Add(offx)
		yl := archsimd.BroadcastInt64x4(y).Add(offy)
		for i := 0; i < side; i += 4 {
			if i > last {
				i = last
				x, y = rx[j]+int64(i)*dx, ry[j]+int64(i)*dy
				xl = archsimd.BroadcastInt64x4(x).Add(offx)
				yl = archsimd.BroadcastInt64x4(y).Add(offy)
			}
			// frac·2^-40 in float64 is exact, so rounding it to float32
			// gives pass1t's offsets.
			txs := xl.And(mask).ConvertToFloat64().Mul(scale).ConvertToFloat32()
			tys := yl.And(mask).ConvertToFloat64().Mul(scale).ConvertToFloat32()
			o0 := 16 * (int(y>>fixBits)*w + int(x>>fixBits))
			o1 := 16 * (int((y+dy)>>fixBits)*w + int((x+dx)>>fixBits))
			o2 := 16 * (int((y+2*dy)>>fixBits)*w + int((x+2*dx)>>fixBits))
			o3 := 16 * (int((y+3*dy)>>fixBits)*w + int((x+3*dx)>>fixBits))
			h0 := cellRows(tab[o0:o0+16:o0+16], tys.SelectFromPair(0, 0, 4, 4, tys))
			h1 := cellRows(tab[o1:o1+16:o1+16], tys.SelectFromPair(1, 1, 5, 5, tys))
			h2 := cellRows(tab[o2:o2+16:o2+16], tys.SelectFromPair(2, 2, 6, 6, tys))
			h3 := cellRows(tab[o3:o3+16:o3+16], tys.SelectFromPair(3, 3, 7, 7, tys))
			// Transpose: ci holds the coefficients of tx^i of the four pixels.
			t0 := h0.SelectFromPair(0, 1, 4, 5, h1)
			t1 := h0.SelectFromPair(2, 3, 6, 7, h1)
			t2 := h2.SelectFromPair(0, 1, 4, 5, h3)
			t3 := h2.SelectFromPair(2, 3, 6, 7, h3)
			c0 := t0.SelectFromPair(0, 2, 4, 6, t2)
			c1 := t0.SelectFromPair(1, 3, 5, 7, t2)
			c2 := t1.SelectFromPair(0, 2, 4, 6, t3)
			c3 := t1.SelectFromPair(1, 3, 5, 7, t3)
			v := c3.MulAdd(txs, c2).MulAdd(txs, c1).MulAdd(txs, c0)
			v.ConvertToFloat64().StoreSlice(g[i : i+4])
			x, y = x+4*dx, y+4*dy
			xl, yl = xl.Add(dx4), yl.Add(dy4)
		}
		f := s.f[k : k+side]
		fx := s.fx[k : k+side]
		fy := s.fy[k : k+side]
		xi := s.xis[:side]
		var rx0, rx1, ry0, ry1 archsimd.Float64x4
		for i := 0; i < side; i += 4 {
			var v archsimd.Float64x4
			if i > last {
				// The last group overlaps the one before: weigh its
				// repeated pixels by zero.
				i = last
				v = archsimd.LoadFloat64x4Slice(g[i:]).Sub(fmean4).Mul(archsimd.LoadFloat64x4(lastW))
			} else {
				v = archsimd.LoadFloat64x4Slice(g[i:]).Sub(fmean4)
			}
			vg = vg.Add(v)
			vgg = v.MulAdd(v, vgg)
			vfg = archsimd.LoadFloat64x4Slice(f[i:]).MulAdd(v, vfg)
			a := archsimd.LoadFloat64x4Slice(fx[i:]).Mul(v)
			b := archsimd.LoadFloat64x4Slice(fy[i:]).Mul(v)
			xv := archsimd.LoadFloat64x4Slice(xi[i:])
			rx0 = rx0.Add(a)
			rx1 = a.MulAdd(xv, rx1)
			ry0 = ry0.Add(b)
			ry1 = b.MulAdd(xv, ry1)
		}
		e := archsimd.LoadFloat64x4Slice(etas[4*j:])
		vx0, vx1, vx2 = vx0.Add(rx0), vx1.Add(rx1), rx0.MulAdd(e, vx2)
		vy0, vy1, vy2 = vy0.Add(ry0), vy1.Add(ry1), ry0.MulAdd(e, vy2)
		k += side
	}
	out := &s.vout // not a local: zeroing one would take legacy SSE stores
	vg.Store(&out[0])
	vgg.Store(&out[1])
	vfg.Store(&out[2])
	vx0.Store(&out[3])
	vx1.Store(&out[4])
	vx2.Store(&out[5])
	vy0.Store(&out[6])
	vy1.Store(&out[7])
	vy2.Store(&out[8])
	archsimd.ClearAVXUpperBits()
	var sum [9]float64
	for q := range out {
		sum[q] = (out[q][0] + out[q][1]) + (out[q][2] + out[q][3])
	}
	*sg, *sgg, *sfg = sum[0], sum[1], sum[2]
	sjg[U], sjg[Ux], sjg[Uy] = sum[3], sum[4], sum[5]
	sjg[V], sjg[Vx], sjg[Vy] = sum[6], sum[7], sum[8]
	return true
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
// pixels of a subset row at a time. The fixed-point positions are
// pass2t's: along a row x advances by a first difference that grows by
// the constant second difference ddx, so pixel i of a group starting at x
// with first difference d is at x + i·d + i(i−1)/2·ddx, exact in integers.
// Every position is checked against the usable area in integer arithmetic
// before its cell is read, so pass2v reports false exactly when pass2t
// does. The row sums are added to the totals at the end of each row
// through memory, so that the loops keep few vectors live.
func (s *solver) pass2v(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	m := s.m
	fm := float64(m)
	side := 2*m + 1
	if side < 4 {
		return s.pass2t(p, sg, sgg, sfg, sjg)
	}
	lo, hx, hy := fix(s.lo), fix(s.defW), fix(s.defH)
	ddx, ddy := int64(math.Round(p[Uxx]*fixOne)), int64(math.Round(p[Vxx]*fixOne))
	// Scalar prologue: each row's fixed-point start and first differences
	// (pass2t's), and the row weights η and η²/2.
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
	fmeanv := [4]float64{s.fmean, s.fmean, s.fmean, s.fmean}
	scalev := [4]float64{1.0 / fixOne, 1.0 / fixOne, 1.0 / fixOne, 1.0 / fixOne}
	last := side - 4
	tab := s.tab.Coefficients()
	w := s.tab.W
	etas, etas2 := s.etas[:4*side], s.etas2h[:4*side]
	lastW := &s.lastW
	g := s.gbuf[:side]
	out := &s.vout2
	*out = [15][4]float64{}

	dd4 := &s.lanes
	dd4[0], dd4[1], dd4[2], dd4[3] = 0, 4*ddx, 8*ddx, 12*ddx
	dd4[4], dd4[5], dd4[6], dd4[7] = 0, 4*ddy, 8*ddy, 12*ddy
	pos := &s.lanes2 // lane offsets from a group's first pixel

	mask := archsimd.BroadcastInt64x4(fixMask)
	scale := archsimd.LoadFloat64x4(&scalev)
	fmean4 := archsimd.LoadFloat64x4(&fmeanv)
	ddx4 := archsimd.LoadInt64x4((*[4]int64)(dd4[0:4]))
	ddy4 := archsimd.LoadInt64x4((*[4]int64)(dd4[4:8]))
	// ½ from memory: a floating-point constant live across the loops
	// would be reloaded into a register by a legacy SSE move.
	half := archsimd.LoadFloat64x4(&s.half4)
	k := 0
	for j := 0; j < side; j++ {
		x0, y0, dx0, dy0 := rx[j], ry[j], rdx[j], rdy[j]
		x, y, dx, dy := x0, y0, dx0, dy0
		pos[0], pos[1], pos[2], pos[3] = 0, dx, 2*dx+ddx, 3*dx+3*ddx
		pos[4], pos[5], pos[6], pos[7] = 0, dy, 2*dy+ddy, 3*dy+3*ddy
		offx := archsimd.LoadInt64x4((*[4]int64)(pos[0:4]))
		offy := archsimd.LoadInt64x4((*[4]int64)(pos[4:8]))
		for i := 0; i < side; i += 4 {
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
			x1, y1 := x+dx, y+dy
			x2, y2 := x1+dx+ddx, y1+dy+ddy
			x3, y3 := x2+dx+2*ddx, y2+dy+2*ddy
			if !(x >= lo && x <= hx && y >= lo && y <= hy && x1 >= lo && x1 <= hx && y1 >= lo && y1 <= hy &&
				x2 >= lo && x2 <= hx && y2 >= lo && y2 <= hy && x3 >= lo && x3 <= hx && y3 >= lo && y3 <= hy) {
				archsimd.ClearAVXUpperBits()
				return false
			}
			xl := archsimd.BroadcastInt64x4(x).Add(offx)
			yl := archsimd.BroadcastInt64x4(y).Add(offy)
			offx, offy = offx.Add(ddx4), offy.Add(ddy4)
			txs := xl.And(mask).ConvertToFloat64().Mul(scale).ConvertToFloat32()
			tys := yl.And(mask).ConvertToFloat64().Mul(scale).ConvertToFloat32()
			o0 := 16 * (int(y>>fixBits)*w + int(x>>fixBits))
			o1 := 16 * (int(y1>>fixBits)*w + int(x1>>fixBits))
			o2 := 16 * (int(y2>>fixBits)*w + int(x2>>fixBits))
			o3 := 16 * (int(y3>>fixBits)*w + int(x3>>fixBits))
			h0 := cellRows(tab[o0:o0+16:o0+16], tys.SelectFromPair(0, 0, 4, 4, tys))
			h1 := cellRows(tab[o1:o1+16:o1+16], tys.SelectFromPair(1, 1, 5, 5, tys))
			h2 := cellRows(tab[o2:o2+16:o2+16], tys.SelectFromPair(2, 2, 6, 6, tys))
			h3 := cellRows(tab[o3:o3+16:o3+16], tys.SelectFromPair(3, 3, 7, 7, tys))
			t0 := h0.SelectFromPair(0, 1, 4, 5, h1)
			t1 := h0.SelectFromPair(2, 3, 6, 7, h1)
			t2 := h2.SelectFromPair(0, 1, 4, 5, h3)
			t3 := h2.SelectFromPair(2, 3, 6, 7, h3)
			c0 := t0.SelectFromPair(0, 2, 4, 6, t2)
			c1 := t0.SelectFromPair(1, 3, 5, 7, t2)
			c2 := t1.SelectFromPair(0, 2, 4, 6, t3)
			c3 := t1.SelectFromPair(1, 3, 5, 7, t3)
			v := c3.MulAdd(txs, c2).MulAdd(txs, c1).MulAdd(txs, c0)
			v.ConvertToFloat64().StoreSlice(g[i : i+4])
			x, y = x3+dx+3*ddx, y3+dy+3*ddy
			dx, dy = dx+4*ddx, dy+4*ddy
		}
		f := s.f[k : k+side]
		fx := s.fx[k : k+side]
		fy := s.fy[k : k+side]
		xi := s.xis[:side]
		var vg, vgg, vfg, rx0, rx1, rx2, ry0, ry1, ry2 archsimd.Float64x4
		for i := 0; i < side; i += 4 {
			var v archsimd.Float64x4
			if i > last {
				i = last
				v = archsimd.LoadFloat64x4Slice(g[i:]).Sub(fmean4).Mul(archsimd.LoadFloat64x4(lastW))
			} else {
				v = archsimd.LoadFloat64x4Slice(g[i:]).Sub(fmean4)
			}
			vg = vg.Add(v)
			vgg = v.MulAdd(v, vgg)
			vfg = archsimd.LoadFloat64x4Slice(f[i:]).MulAdd(v, vfg)
			xv := archsimd.LoadFloat64x4Slice(xi[i:])
			a := archsimd.LoadFloat64x4Slice(fx[i:]).Mul(v)
			ax := a.Mul(xv)
			rx0, rx1, rx2 = rx0.Add(a), rx1.Add(ax), ax.MulAdd(xv, rx2)
			b := archsimd.LoadFloat64x4Slice(fy[i:]).Mul(v)
			bx := b.Mul(xv)
			ry0, ry1, ry2 = ry0.Add(b), ry1.Add(bx), bx.MulAdd(xv, ry2)
		}
		// Totals: out[0..2] Σg, Σg², Σf̃g; out[3+q] for the parameters in
		// the order U, Ux, Uy, Uxx, Uxy, Uyy, V, …, each Σ over rows of a
		// row sum times 1, η, η²/2 or ½ (for ξ²/2).
		e := archsimd.LoadFloat64x4Slice(etas[4*j:])
		e2 := archsimd.LoadFloat64x4Slice(etas2[4*j:])
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
		k += side
	}
	archsimd.ClearAVXUpperBits()
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

// addTo adds x to *d.
func addTo(d *[4]float64, x archsimd.Float64x4) {
	archsimd.LoadFloat64x4(d).Add(x).Store(d)
}

// addMulTo adds x·y to *d.
func addMulTo(d *[4]float64, x, y archsimd.Float64x4) {
	x.MulAdd(y, archsimd.LoadFloat64x4(d)).Store(d)
}

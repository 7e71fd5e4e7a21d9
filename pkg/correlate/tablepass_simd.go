//go:build goexperiment.simd && amd64

package correlate

import (
	"math"
	"simd/archsimd"
)

// The table passes with vector instructions (GOEXPERIMENT=simd,
// simd/archsimd; used when the CPU has AVX-512 and FMA and the subset side
// is at least 8, the portable passes otherwise). Four pixels of a subset
// row are interpolated at a time from the bicubic table (sampleRow: each
// cell's bicubic by Horner's rule in ty on its four coefficient rows, the
// four results transposed and finished by Horner's rule in tx across the
// four pixels) or from the row table (sampleRows, tablepass_simd_rows.go),
// and the sums are kept in eight float64 lanes. The fractional offsets are
// the portable passes' (the same fixed-point coordinates); the sums differ
// from theirs by rounding only (fused multiply-adds, another order of
// evaluation and summation), which TestVectorPassMatchesPortable and
// TestVectorPass2MatchesPortable bound.

// rowsDefault reports whether Run tabulates the deformed image as a row
// table (spline.RowTable) rather than the bicubic table (spline.Table):
// where the vector passes are used. They read a quarter of the bytes of
// the bicubic table for a few more operations per sample (sampleRows),
// which is faster in a run (BenchmarkRun1024Rows against
// BenchmarkRun1024Cells) and takes 16 bytes per pixel instead of 64; the
// portable row passes are slower than the portable bicubic ones, so
// elsewhere the bicubic table stays.
var rowsDefault = vectorPass

// vectorPass reports whether this build and CPU use pass1v.
var vectorPass = archsimd.X86.AVX512() && archsimd.X86.FMA()

// pass1fast is the first-order table pass Run uses.
func (s *solver) pass1fast(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	switch {
	case vectorPass && !s.portable && 2*s.m+1 >= 8:
		return s.pass1v(p, sg, sgg, sfg, sjg)
	case s.qtab != nil:
		return s.pass1q(p, sg, sgg, sfg, sjg)
	case s.rtab != nil:
		return s.pass1r(p, sg, sgg, sfg, sjg)
	}
	return s.pass1t(p, sg, sgg, sfg, sjg)
}

// initVector sets up the solver's scratch of pass1v.
func (s *solver) initVector() {
	side := 2*s.m + 1
	// sampleRows stores eight lanes at a time, the last four unused.
	s.gbuf = make([]float64, side, side+4)
	s.rowX = make([]int64, side)
	s.rowY = make([]int64, side)
	s.half8 = [8]float64{0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5}
	s.scale4 = [4]float64{1.0 / fixOne, 1.0 / fixOne, 1.0 / fixOne, 1.0 / fixOne}
	for l := range s.scale8 {
		s.scale8[l] = 1.0 / fixOne
	}
	s.rowDX = make([]int64, side)
	s.rowDY = make([]int64, side)
	s.etas8 = make([]float64, 8*side)
	s.etas2h8 = make([]float64, 8*side)
	for j := 0; j < side; j++ {
		eta := float64(j - s.m)
		for l := 0; l < 8; l++ {
			s.etas8[8*j+l] = eta
			s.etas2h8[8*j+l] = eta * eta / 2
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
	for l := range 16 {
		s.rowSpread[l] = uint32(4 + l/4)
		s.rowK[0][l], s.rowK[1][l], s.rowK[2][l] = 3, 4, -2
		for i := range 4 {
			s.rowPick[i][l] = uint32(4*(l%4) + i)
		}
	}
}

// pass2fast is the second-order table pass Run uses.
func (s *solver) pass2fast(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	switch {
	case vectorPass && !s.portable && 2*s.m+1 >= 8:
		return s.pass2v(p, sg, sgg, sfg, sjg)
	case s.qtab != nil:
		return s.pass2q(p, sg, sgg, sfg, sjg)
	case s.rtab != nil:
		return s.pass2r(p, sg, sgg, sfg, sjg)
	}
	return s.pass2t(p, sg, sgg, sfg, sjg)
}

// pass2v is pass2t (or pass2r) with vector instructions, in the manner of
// pass1v: each subset row is checked and set out by row2v, interpolated
// four pixels at a time by sample and accumulated eight at a time by
// acc2v. The fixed-point positions are pass2t's: along a row x advances by
// a first difference that grows by the constant second difference ddx, so
// pixel i of a group starting at x with first difference d is at
// x + i·d + i(i−1)/2·ddx, exact in integers. Every position is checked
// against the usable area in integer arithmetic before its cell is read,
// so pass2v reports false exactly when pass2t does. The row sums are added
// to the totals at the end of each row through memory.
func (s *solver) pass2v(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	m := s.m
	fm := float64(m)
	side := 2*m + 1
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
	fmv := s.fmean
	s.fmean8 = [8]float64{fmv, fmv, fmv, fmv, fmv, fmv, fmv, fmv}
	s.vout2 = [15][8]float64{}
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
		sum[q] = ((o[0] + o[1]) + (o[2] + o[3])) + ((o[4] + o[5]) + (o[6] + o[7]))
	}
	*sg, *sgg, *sfg = sum[0], sum[1], sum[2]
	sjg[U], sjg[Ux], sjg[Uy], sjg[Uxx], sjg[Uxy], sjg[Uyy] = sum[3], sum[4], sum[5], sum[6], sum[7], sum[8]
	sjg[V], sjg[Vx], sjg[Vy], sjg[Vxx], sjg[Vxy], sjg[Vyy] = sum[9], sum[10], sum[11], sum[12], sum[13], sum[14]
	return true
}

// row2v interpolates the second-order subset row starting at the
// fixed-point position (x0, y0) with first differences (dx0, dy0) and
// second differences (ddx, ddy) into s.gbuf, and reports whether every
// position lies in the usable area s.lim. Pixel i is at x0 + i·dx0 +
// i(i−1)/2·ddx; from one group of four to the next, lane l advances by
// 4·dx_l + 6·ddx, where dx_l is its first difference, and that step grows
// by 16·ddx. The groups' positions are set out for sampleRow and checked
// in a first loop, before any cell is read.
//
//go:noinline
func (s *solver) row2v(x0, y0, dx0, dy0, ddx, ddy int64) bool {
	n := 2*s.m + 1
	last := int64(n - 4)
	rv := &s.rv
	// The last group's first pixel, from the closed form.
	t := last * (last - 1) / 2
	xL, yL := x0+last*dx0+t*ddx, y0+last*dy0+t*ddy
	dxL, dyL := dx0+last*ddx, dy0+last*ddy
	for l := int64(0); l < 4; l++ {
		t := l * (l - 1) / 2
		rv[0][l], rv[0][4+l] = l*dx0+t*ddx, l*dy0+t*ddy
		rv[1][l], rv[1][4+l] = l*dxL+t*ddx, l*dyL+t*ddy
		rv[2][l], rv[2][4+l] = 4*dx0+(4*l+6)*ddx, 4*dy0+(4*l+6)*ddy
		rv[3][l], rv[3][4+l] = 16*ddx, 16*ddy
	}
	xl := archsimd.BroadcastInt64x4(x0).Add(archsimd.LoadInt64x4((*[4]int64)(rv[0][:4])))
	yl := archsimd.BroadcastInt64x4(y0).Add(archsimd.LoadInt64x4((*[4]int64)(rv[0][4:])))
	dx, dy := archsimd.LoadInt64x4((*[4]int64)(rv[2][:4])), archsimd.LoadInt64x4((*[4]int64)(rv[2][4:]))
	ddx4, ddy4 := archsimd.LoadInt64x4((*[4]int64)(rv[3][:4])), archsimd.LoadInt64x4((*[4]int64)(rv[3][4:]))
	xmin := archsimd.BroadcastInt64x4(xL).Add(archsimd.LoadInt64x4((*[4]int64)(rv[1][:4])))
	ymin := archsimd.BroadcastInt64x4(yL).Add(archsimd.LoadInt64x4((*[4]int64)(rv[1][4:])))
	xmax, ymax := xmin, ymin
	for i := 0; i+4 <= n; i += 4 {
		xmin, xmax = xmin.Min(xl), xmax.Max(xl)
		ymin, ymax = ymin.Min(yl), ymax.Max(yl)
		xl, yl = xl.Add(dx), yl.Add(dy)
		dx, dy = dx.Add(ddx4), dy.Add(ddy4)
	}
	lo4 := archsimd.BroadcastInt64x4(s.lim[0])
	hx4, hy4 := archsimd.BroadcastInt64x4(s.lim[1]), archsimd.BroadcastInt64x4(s.lim[2])
	if xmin.Less(lo4).Or(xmax.Greater(hx4)).Or(ymin.Less(lo4)).Or(ymax.Greater(hy4)).ToBits() != 0 {
		return false
	}
	s.sample(x0, y0, xL, yL)
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
	fmean := archsimd.LoadFloat64x8(&s.fmean8)
	var vg, vgg, vfg, rx0, rx1, rx2, ry0, ry1, ry2 archsimd.Float64x8
	i := 0
	for ; i+8 <= len(g); i += 8 {
		v := archsimd.LoadFloat64x8((*[8]float64)(g[i : i+8])).Sub(fmean)
		vg, vgg, vfg = v.Add(vg), v.MulAdd(v, vgg), archsimd.LoadFloat64x8((*[8]float64)(f[i:i+8])).MulAdd(v, vfg)
		rx0, rx1, rx2 = accMoments2(v, (*[8]float64)(fx[i:i+8]), (*[8]float64)(xi[i:i+8]), rx0, rx1, rx2)
		ry0, ry1, ry2 = accMoments2(v, (*[8]float64)(fy[i:i+8]), (*[8]float64)(xi[i:i+8]), ry0, ry1, ry2)
	}
	if i < len(g) {
		// The last group overlaps the one before: its repeated pixels
		// are weighted by zero (the side is at least 8).
		i = len(g) - 8
		v := archsimd.LoadFloat64x8((*[8]float64)(g[i : i+8])).Sub(fmean).Masked(archsimd.Mask64x8FromBits(s.lastBits8))
		vg, vgg, vfg = v.Add(vg), v.MulAdd(v, vgg), archsimd.LoadFloat64x8((*[8]float64)(f[i:i+8])).MulAdd(v, vfg)
		rx0, rx1, rx2 = accMoments2(v, (*[8]float64)(fx[i:i+8]), (*[8]float64)(xi[i:i+8]), rx0, rx1, rx2)
		ry0, ry1, ry2 = accMoments2(v, (*[8]float64)(fy[i:i+8]), (*[8]float64)(xi[i:i+8]), ry0, ry1, ry2)
	}
	e := archsimd.LoadFloat64x8((*[8]float64)(s.etas8[8*j : 8*j+8]))
	e2 := archsimd.LoadFloat64x8((*[8]float64)(s.etas2h8[8*j : 8*j+8]))
	half := archsimd.LoadFloat64x8(&s.half8)
	out := &s.vout2
	addTo8(&out[0], vg)
	addTo8(&out[1], vgg)
	addTo8(&out[2], vfg)
	addTo8(&out[3], rx0)
	addTo8(&out[4], rx1)
	addMulTo8(&out[5], rx0, e)
	addMulTo8(&out[6], rx2, half)
	addMulTo8(&out[7], rx1, e)
	addMulTo8(&out[8], rx0, e2)
	addTo8(&out[9], ry0)
	addTo8(&out[10], ry1)
	addMulTo8(&out[11], ry0, e)
	addMulTo8(&out[12], ry2, half)
	addMulTo8(&out[13], ry1, e)
	addMulTo8(&out[14], ry0, e2)
}

// accMoments2 adds a group of eight pixels (v = g − f̄, and the subset's
// gradient component d and ξ there) to the lane sums Σd·v, Σd·v·ξ and
// Σd·v·ξ² of acc2v.
func accMoments2(v archsimd.Float64x8, d, xi *[8]float64, r0, r1, r2 archsimd.Float64x8) (_, _, _ archsimd.Float64x8) {
	xv := archsimd.LoadFloat64x8(xi)
	a := archsimd.LoadFloat64x8(d).Mul(v)
	ax := a.Mul(xv)
	return r0.Add(a), r1.Add(ax), ax.MulAdd(xv, r2)
}

// pass1v is pass1t (or pass1r) with vector instructions. Each subset row is
// interpolated by sample (sampleRow or sampleRows, as for pass2v, here with
// a constant step) and accumulated by acc1v, functions of their own, so
// that each loop has the registers to itself (inlined in one function, the
// integer state of the first loop spilled to the stack on every group of
// pixels). All scalar floating-point work is done before the first vector
// instruction or after ClearAVXUpperBits: legacy SSE instructions while
// the upper halves of the vector registers are in use are very slow on
// this hardware (the compiler also spills 128-bit vectors with legacy
// moves, so the values that stay live across the loops are 256-bit).
func (s *solver) pass1v(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	m := s.m
	fm := float64(m)
	side := 2*m + 1
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
	rv := &s.rv
	last := int64(side - 4)
	for l := range int64(4) {
		rv[0][l], rv[0][4+l] = l*dx, l*dy
		rv[1][l], rv[1][4+l] = l*dx, l*dy
		rv[2][l], rv[2][4+l] = 4*dx, 4*dy
		rv[3][l], rv[3][4+l] = 0, 0
	}
	s.vout8 = [9][8]float64{}
	fmv := s.fmean
	s.fmean8 = [8]float64{fmv, fmv, fmv, fmv, fmv, fmv, fmv, fmv}
	k := 0
	for j := 0; j < side; j++ {
		s.sample(rx[j], ry[j], rx[j]+last*dx, ry[j]+last*dy)
		s.acc1v(k, j)
		k += side
	}
	archsimd.ClearAVXUpperBits()
	out := &s.vout8
	var sum [9]float64
	for q := range out {
		o := &out[q]
		sum[q] = ((o[0] + o[1]) + (o[2] + o[3])) + ((o[4] + o[5]) + (o[6] + o[7]))
	}
	*sg, *sgg, *sfg = sum[0], sum[1], sum[2]
	sjg[U], sjg[Ux], sjg[Uy] = sum[3], sum[4], sum[5]
	sjg[V], sjg[Vx], sjg[Vy] = sum[6], sum[7], sum[8]
	return true
}

// sample interpolates a subset row (see sampleRow) from the solver's
// table: the quintic or cubic row table if it has one (sampleRows5,
// sampleRows), else the bicubic one.
func (s *solver) sample(x, y, xL, yL int64) {
	switch {
	case s.qtab != nil:
		s.sampleRows5(x, y, xL, yL)
	case s.rtab != nil:
		s.sampleRows(x, y, xL, yL)
	default:
		s.sampleRow(x, y, xL, yL)
	}
}

// sampleRow interpolates the bicubic table at the fixed-point positions of a
// subset row (inside the table) into s.gbuf, four pixels at a time, the
// last group overlapping the one before unless the side is a multiple of
// four. The first group's first pixel is at (x, y), the last's at (xL,
// yL); s.rv holds the offsets of the lanes from those (x, y of the first
// group, x, y of the last), the step of each lane from one group to the next (x, y),
// and that step's growth per group (x, y; zero for a first-order warp).
// Each cell's bicubic is evaluated by Horner's rule in ty on its four
// coefficient rows, the four results are transposed and finished by
// Horner's rule in tx across the four pixels. The cells are addressed from
// the vector coordinates, and the frac·2⁻⁴⁰ of each lane is exact in
// float64, so rounding it to float32 gives the portable passes' offsets.
//
//go:noinline
func (s *solver) sampleRow(x, y, xL, yL int64) {
	g := s.gbuf[:2*s.m+1]
	last := len(g) - 4
	tab := s.tab.Coefficients()
	w := s.tab.W
	offs := &s.offs
	rv := &s.rv
	mask := archsimd.BroadcastInt64x4(fixMask)
	scale := archsimd.LoadFloat64x4(&s.scale4)
	xl := archsimd.BroadcastInt64x4(x).Add(archsimd.LoadInt64x4((*[4]int64)(rv[0][:4])))
	yl := archsimd.BroadcastInt64x4(y).Add(archsimd.LoadInt64x4((*[4]int64)(rv[0][4:])))
	dx, dy := archsimd.LoadInt64x4((*[4]int64)(rv[2][:4])), archsimd.LoadInt64x4((*[4]int64)(rv[2][4:]))
	w4 := archsimd.BroadcastInt64x4(int64(w)).AsUint32x8()
	for i := 0; i < len(g); i += 4 {
		if i > last {
			i = last
			xl = archsimd.BroadcastInt64x4(xL).Add(archsimd.LoadInt64x4((*[4]int64)(rv[1][:4])))
			yl = archsimd.BroadcastInt64x4(yL).Add(archsimd.LoadInt64x4((*[4]int64)(rv[1][4:])))
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
		xl, yl = xl.Add(dx), yl.Add(dy)
		dx, dy = dx.Add(archsimd.LoadInt64x4((*[4]int64)(rv[3][:4]))), dy.Add(archsimd.LoadInt64x4((*[4]int64)(rv[3][4:])))
	}
}

// acc1v adds row j of the subset (its pixels from k on, interpolated in
// s.gbuf) to the lane sums s.vout8 of pass1v, eight pixels at a time (the
// last group overlapping the one before unless the side is a multiple of
// eight, its repeated lanes weighted by zero; the side is at least 8). The
// vectors are loaded through array pointers of slices of one length, so
// that the loop carries no bounds checks or pointer masks.
//
//go:noinline
func (s *solver) acc1v(k, j int) {
	side := 2*s.m + 1
	g := s.gbuf[:side]
	f := s.f[k : k+side]
	fx, fy, xi := s.fx[k:k+side], s.fy[k:k+side], s.xis[:side]
	f, fx, fy, xi = f[:len(g)], fx[:len(g)], fy[:len(g)], xi[:len(g)]
	fmean := archsimd.LoadFloat64x8(&s.fmean8)
	var vg, vgg, vfg, rx0, rx1, ry0, ry1 archsimd.Float64x8
	i := 0
	for ; i+8 <= len(g); i += 8 {
		v := archsimd.LoadFloat64x8((*[8]float64)(g[i : i+8])).Sub(fmean)
		vg, vgg, vfg, rx0, rx1, ry0, ry1 = acc1(v, f[i:i+8], fx[i:i+8], fy[i:i+8], xi[i:i+8], vg, vgg, vfg, rx0, rx1, ry0, ry1)
	}
	if i < len(g) {
		i = len(g) - 8
		v := archsimd.LoadFloat64x8((*[8]float64)(g[i : i+8])).Sub(fmean).Masked(archsimd.Mask64x8FromBits(s.lastBits8))
		vg, vgg, vfg, rx0, rx1, ry0, ry1 = acc1(v, f[i:i+8], fx[i:i+8], fy[i:i+8], xi[i:i+8], vg, vgg, vfg, rx0, rx1, ry0, ry1)
	}
	e := archsimd.LoadFloat64x8((*[8]float64)(s.etas8[8*j : 8*j+8]))
	out := &s.vout8
	addTo8(&out[0], vg)
	addTo8(&out[1], vgg)
	addTo8(&out[2], vfg)
	addTo8(&out[3], rx0)
	addTo8(&out[4], rx1)
	addMulTo8(&out[5], rx0, e)
	addTo8(&out[6], ry0)
	addTo8(&out[7], ry1)
	addMulTo8(&out[8], ry0, e)
}

// addTo8 adds x to *d.
func addTo8(d *[8]float64, x archsimd.Float64x8) {
	archsimd.LoadFloat64x8(d).Add(x).Store(d)
}

// addMulTo8 adds x·y to *d.
func addMulTo8(d *[8]float64, x, y archsimd.Float64x8) {
	x.MulAdd(y, archsimd.LoadFloat64x8(d)).Store(d)
}

// acc1 adds a group of eight pixels (v = g − f̄, and the subset's f̃, fx,
// fy and ξ there) to the lane sums of acc1v: Σv, Σv², Σf̃v, Σfx·v,
// Σfx·v·ξ, Σfy·v, Σfy·v·ξ.
func acc1(v archsimd.Float64x8, f, fx, fy, xi []float64, vg, vgg, vfg, rx0, rx1, ry0, ry1 archsimd.Float64x8) (_, _, _, _, _, _, _ archsimd.Float64x8) {
	vg, vgg = vg.Add(v), v.MulAdd(v, vgg)
	vfg = archsimd.LoadFloat64x8((*[8]float64)(f)).MulAdd(v, vfg)
	a := archsimd.LoadFloat64x8((*[8]float64)(fx)).Mul(v)
	b := archsimd.LoadFloat64x8((*[8]float64)(fy)).Mul(v)
	xv := archsimd.LoadFloat64x8((*[8]float64)(xi))
	return vg, vgg, vfg, rx0.Add(a), a.MulAdd(xv, rx1), ry0.Add(b), b.MulAdd(xv, ry1)
}

// cell4 evaluates the four rows of a cell's 16 coefficients at ty (in
// every lane) by Horner's rule: lane i is Σ_j c[4j+i]·ty^j. The slice is
// converted once to an array pointer (one bounds check).
func cell4(c []float32, ty archsimd.Float32x4) archsimd.Float32x4 {
	a := (*[16]float32)(c)
	r3 := archsimd.LoadFloat32x4((*[4]float32)(a[12:16]))
	r2 := archsimd.LoadFloat32x4((*[4]float32)(a[8:12]))
	r1 := archsimd.LoadFloat32x4((*[4]float32)(a[4:8]))
	r0 := archsimd.LoadFloat32x4((*[4]float32)(a[0:4]))
	return r3.MulAdd(ty, r2).MulAdd(ty, r1).MulAdd(ty, r0)
}

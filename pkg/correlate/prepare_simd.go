//go:build goexperiment.simd && amd64

package correlate

import (
	"math"
	"simd/archsimd"
	"unsafe"
)

// prepare1fast is the first-order grid-point prepare Run uses.
func (s *solver) prepare1fast(ix, iy int) Status {
	if vectorPass && !s.portable && 2*s.m+1 >= 8 {
		return s.prepare1v(ix, iy)
	}
	if s.mom != nil {
		if p := s.mom.at1(ix, iy); p != nil {
			return s.prepare1m(ix, iy, p)
		}
	}
	return s.prepare1(ix, iy)
}

// prepare1v is prepare1 with vector instructions, eight columns of the
// subset at a time: each lane walks down its column from the last row to
// the first with hessian1's running sums (now in η: c0 += w, c1 += c0,
// c2 += c1, no multiplications), for the weights w of the Hessian (fx²,
// fx·fy, fy²) and those of Σ J f and Σ J (fx·f, fy·f, fx, fy); the moments
// in η follow per lane as in addRow2, and the powers of ξ are applied once
// per group of columns. The last group overlaps the one before unless the
// side is a multiple of eight, its repeated lanes weighted by zero. The
// sums differ from prepare1's by rounding only (another order, fused
// multiply-adds), which TestPrepare1MatchesGeneral bounds. Each loop keeps
// at most 14 vectors live (the compiler's register set), and, as in
// pass1v, no scalar floating-point instruction runs between the first
// vector instruction and ClearAVXUpperBits.
func (s *solver) prepare1v(ix, iy int) Status {
	m := s.m
	side := 2*m + 1
	last := side - 8
	stride, w := s.ref.Stride, s.ref.W
	// The subset's first sample (ix−m, iy−m) lies in the image and its
	// last (ix+m, iy+m) too, checked by prepare; f, fx, fy hold s.n.
	_ = s.ref.Pix[(iy+m)*stride+ix+m]
	_ = s.gx[(iy+m)*w+ix+m]
	_ = s.gy[(iy+m)*w+ix+m]
	_, _, _ = s.f[s.n-1], s.fx[s.n-1], s.fy[s.n-1]
	bPix, bGx, bGy := unsafe.Pointer(unsafe.SliceData(s.ref.Pix)), unsafe.Pointer(unsafe.SliceData(s.gx)), unsafe.Pointer(unsafe.SliceData(s.gy))
	bF, bFx, bFy := unsafe.Pointer(unsafe.SliceData(s.f)), unsafe.Pointer(unsafe.SliceData(s.fx)), unsafe.Pointer(unsafe.SliceData(s.fy))
	rowStride, rowW, rowSide := 4*uintptr(stride), 4*uintptr(w), 8*uintptr(side)
	xis := s.xis[:side]
	lastMask := archsimd.Mask64x8FromBits(s.lastBits8)
	ccv := s.cc8
	cc := archsimd.LoadFloat64x8(&ccv[0])  // m + 1
	cc2 := archsimd.LoadFloat64x8(&ccv[1]) // 2(m+1) + 1
	cc3 := archsimd.LoadFloat64x8(&ccv[2]) // (m+1)(m+2)
	out := &s.pout
	// out[q][l]: lane sums. 0: Σf; 1–6, 7–12, 13–18: Σ w·(1, ξ, ξ², η,
	// ξη, η²) for fx², fx fy, fy²; 19–21, 22–24, 25–27, 28–30: Σ w·(1, ξ,
	// η) for fx f, fy f, fx, fy.
	*out = [31][8]float64{}
	for g := 0; g < side; g += 8 {
		full := true
		if g > last {
			g, full = last, false
		}
		xi := archsimd.LoadFloat64x8Slice(xis[g:])
		// Pass 1: copy, and the Hessian's weights. The rows are walked
		// through pointers (the subset lies in the image, checked by
		// prepare, and g+8 ≤ side): byte offsets o, po, k of row j in the
		// image, the gradients and the copies.
		var a0, a1, a2, b0, b1, b2, c0, c1, c2 archsimd.Float64x8
		o := 4 * uintptr((iy+m)*stride+ix-m+g)
		po := 4 * uintptr((iy+m)*w+ix-m+g)
		k := 8 * uintptr((side-1)*side+g)
		for j := side - 1; j >= 0; j-- {
			v := archsimd.LoadFloat32x8((*[8]float32)(unsafe.Add(bPix, o))).ConvertToFloat64()
			gx := archsimd.LoadFloat32x8((*[8]float32)(unsafe.Add(bGx, po))).ConvertToFloat64()
			gy := archsimd.LoadFloat32x8((*[8]float32)(unsafe.Add(bGy, po))).ConvertToFloat64()
			v.Store((*[8]float64)(unsafe.Add(bF, k)))
			gx.Store((*[8]float64)(unsafe.Add(bFx, k)))
			gy.Store((*[8]float64)(unsafe.Add(bFy, k)))
			o -= rowStride
			po -= rowW
			k -= rowSide
			if !full {
				gx, gy = gx.Masked(lastMask), gy.Masked(lastMask)
			}
			a0 = gx.MulAdd(gx, a0)
			a1 = a1.Add(a0)
			a2 = a2.Add(a1)
			b0 = gx.MulAdd(gy, b0)
			b1 = b1.Add(b0)
			b2 = b2.Add(b1)
			c0 = gy.MulAdd(gy, c0)
			c1 = c1.Add(c0)
			c2 = c2.Add(c1)
		}
		colMoments((*[6][8]float64)(out[1:7]), a0, a1, a2, xi, cc, cc2, cc3)
		colMoments((*[6][8]float64)(out[7:13]), b0, b1, b2, xi, cc, cc2, cc3)
		colMoments((*[6][8]float64)(out[13:19]), c0, c1, c2, xi, cc, cc2, cc3)
		// Pass 2: Σf and the weights of Σ J f and Σ J.
		var rs, p0, p1, q0, q1, u0, u1, w0, w1 archsimd.Float64x8
		k = 8 * uintptr((side-1)*side+g)
		for j := side - 1; j >= 0; j-- {
			v := archsimd.LoadFloat64x8((*[8]float64)(unsafe.Add(bF, k)))
			gx := archsimd.LoadFloat64x8((*[8]float64)(unsafe.Add(bFx, k)))
			gy := archsimd.LoadFloat64x8((*[8]float64)(unsafe.Add(bFy, k)))
			k -= rowSide
			if !full {
				v, gx, gy = v.Masked(lastMask), gx.Masked(lastMask), gy.Masked(lastMask)
			}
			rs = rs.Add(v)
			p0 = gx.MulAdd(v, p0)
			p1 = p1.Add(p0)
			q0 = gy.MulAdd(v, q0)
			q1 = q1.Add(q0)
			u0 = u0.Add(gx)
			u1 = u1.Add(u0)
			w0 = w0.Add(gy)
			w1 = w1.Add(w0)
		}
		archsimd.LoadFloat64x8(&out[0]).Add(rs).Store(&out[0])
		colMoments1((*[3][8]float64)(out[19:22]), p0, p1, xi, cc)
		colMoments1((*[3][8]float64)(out[22:25]), q0, q1, xi, cc)
		colMoments1((*[3][8]float64)(out[25:28]), u0, u1, xi, cc)
		colMoments1((*[3][8]float64)(out[28:31]), w0, w1, xi, cc)
	}
	archsimd.ClearAVXUpperBits()
	var sum [31]float64
	for q := range out {
		o := &out[q]
		sum[q] = ((o[0] + o[1]) + (o[2] + o[3])) + ((o[4] + o[5]) + (o[6] + o[7]))
	}
	s.fmean = sum[0] / float64(s.n)
	fm := s.fmean
	if !s.centre() {
		return LowContrast
	}
	hxx := [3][3]float64{{sum[1], sum[4], sum[6]}, {sum[2], sum[5]}, {sum[3]}}
	hxy := [3][3]float64{{sum[7], sum[10], sum[12]}, {sum[8], sum[11]}, {sum[9]}}
	hyy := [3][3]float64{{sum[13], sum[16], sum[18]}, {sum[14], sum[17]}, {sum[15]}}
	var h [144]float64
	s.setHessian1(&h, &hxx, &hxy, &hyy)
	// Σ J f̃ = Σ J f − f̄ Σ J, in the order of pow1: (1, ξ, η).
	for a := 0; a < 3; a++ {
		s.sj[a], s.sj[3+a] = sum[25+a], sum[28+a]
		s.b0[a] = sum[19+a] - fm*sum[25+a]
		s.b0[3+a] = sum[22+a] - fm*sum[28+a]
	}
	for a := 6; a < 12; a++ {
		s.b0[a], s.sj[a] = 0, 0
	}
	return s.factor(&h)
}

// colMoments adds to d[0..5] the moments Σ w·(1, ξ, ξ², η, ξη, η²) of the
// columns of one group, from the running sums s0 = Σ w, c1 = Σ (j+1) w,
// c2 = Σ (j+1)(j+2)/2 w down each column (j = 0 … 2m, η = j − m) as in
// addRow2, and the columns' ξ; cc = m + 1, cc2 = 2cc + 1, cc3 = cc(cc+1).
func colMoments(d *[6][8]float64, s0, c1, c2, xi, cc, cc2, cc3 archsimd.Float64x8) {
	s1 := c1.Sub(cc.Mul(s0))                           // Σ η w
	s2 := c2.Add(c2).Sub(cc2.Mul(s1)).Sub(cc3.Mul(s0)) // Σ η² w
	t := xi.Mul(s0)
	archsimd.LoadFloat64x8(&d[0]).Add(s0).Store(&d[0])
	archsimd.LoadFloat64x8(&d[1]).Add(t).Store(&d[1])
	t.MulAdd(xi, archsimd.LoadFloat64x8(&d[2])).Store(&d[2])
	archsimd.LoadFloat64x8(&d[3]).Add(s1).Store(&d[3])
	s1.MulAdd(xi, archsimd.LoadFloat64x8(&d[4])).Store(&d[4])
	archsimd.LoadFloat64x8(&d[5]).Add(s2).Store(&d[5])
}

// colMoments1 is colMoments for Σ w·(1, ξ, η), from s0 = Σ w and
// c1 = Σ (j+1) w.
func colMoments1(d *[3][8]float64, s0, c1, xi, cc archsimd.Float64x8) {
	s1 := c1.Sub(cc.Mul(s0))
	archsimd.LoadFloat64x8(&d[0]).Add(s0).Store(&d[0])
	s0.MulAdd(xi, archsimd.LoadFloat64x8(&d[1])).Store(&d[1])
	archsimd.LoadFloat64x8(&d[2]).Add(s1).Store(&d[2])
}

// prepare2fast is the second-order grid-point prepare Run uses.
func (s *solver) prepare2fast(ix, iy int) Status {
	if vectorPass && !s.portable && 2*s.m+1 >= 8 {
		return s.prepare2v(ix, iy)
	}
	if s.mom != nil {
		if p := s.mom.at(ix, iy); p != nil {
			return s.prepare2m(ix, iy, p)
		}
	}
	return s.prepare2(ix, iy)
}

// prepare2v is prepareAny for the second-order warp and a subset centred on
// the pixel (ix, iy), with vector instructions: the copy and the centring
// eight samples at a time, and the moments of hessian2m eight columns at a
// time as in prepare1v, with running sums down each column up to the
// fourth order in η (c_k = Σ_j C(j+k, k) w_j, turned into powers of η by
// fromRising as hessian2m does in ξ) and the powers of ξ applied once per
// group of columns. The sums differ from prepareAny's by rounding only,
// which TestVectorPrepare2MatchesPortable bounds.
func (s *solver) prepare2v(ix, iy int) Status {
	m := s.m
	side := 2*m + 1
	last := side - 8
	stride, w := s.ref.Stride, s.ref.W
	// The rows through pointers, as in prepare1v: byte offsets of row j's
	// first sample in the image, the gradients and the copies.
	_ = s.ref.Pix[(iy+m)*stride+ix+m]
	_ = s.gx[(iy+m)*w+ix+m]
	_ = s.gy[(iy+m)*w+ix+m]
	_, _, _ = s.f[s.n-1], s.fx[s.n-1], s.fy[s.n-1]
	bPix, bGx, bGy := unsafe.Pointer(unsafe.SliceData(s.ref.Pix)), unsafe.Pointer(unsafe.SliceData(s.gx)), unsafe.Pointer(unsafe.SliceData(s.gy))
	bF, bFx, bFy := unsafe.Pointer(unsafe.SliceData(s.f)), unsafe.Pointer(unsafe.SliceData(s.fx)), unsafe.Pointer(unsafe.SliceData(s.fy))
	lastMask := archsimd.Mask64x8FromBits(s.lastBits8)
	out := &s.pout
	var rs archsimd.Float64x8
	ro, rpo, rk := 4*uintptr((iy-m)*stride+ix-m), 4*uintptr((iy-m)*w+ix-m), uintptr(0)
	for j := 0; j < side; j++ {
		for i := 0; i < side; i += 8 {
			full := true
			if i > last {
				i, full = last, false
			}
			o, po, k := ro+4*uintptr(i), rpo+4*uintptr(i), rk+8*uintptr(i)
			v := archsimd.LoadFloat32x8((*[8]float32)(unsafe.Add(bPix, o))).ConvertToFloat64()
			archsimd.LoadFloat32x8((*[8]float32)(unsafe.Add(bGx, po))).ConvertToFloat64().Store((*[8]float64)(unsafe.Add(bFx, k)))
			archsimd.LoadFloat32x8((*[8]float32)(unsafe.Add(bGy, po))).ConvertToFloat64().Store((*[8]float64)(unsafe.Add(bFy, k)))
			v.Store((*[8]float64)(unsafe.Add(bF, k)))
			if !full {
				v = v.Masked(lastMask)
			}
			rs = rs.Add(v)
		}
		ro, rpo, rk = ro+4*uintptr(stride), rpo+4*uintptr(w), rk+8*uintptr(side)
	}
	rs.Store(&out[0])
	archsimd.ClearAVXUpperBits()
	o := &out[0]
	n := float64(s.n)
	s.fmean = (((o[0] + o[1]) + (o[2] + o[3])) + ((o[4] + o[5]) + (o[6] + o[7]))) / n
	if !s.centre() {
		return LowContrast
	}
	var h [144]float64
	s.hessian2v(&h)
	return s.factor(&h)
}

// centre subtracts f̄ from the subset's samples and sets ‖f − f̄‖, eight
// samples at a time; it reports false for a subset of too little contrast.
func (s *solver) centre() bool {
	fm := s.fmean
	fmv := [8]float64{fm, fm, fm, fm, fm, fm, fm, fm}
	f := s.f[:s.n]
	lastAll := s.n - 8
	out := &s.pout
	fm8 := archsimd.LoadFloat64x8(&fmv)
	var ss archsimd.Float64x8
	for i := 0; i < len(f); i += 8 {
		if i > lastAll {
			i = lastAll
			// Lanes below the previous group's end are centred already.
			mk := archsimd.Mask64x8FromBits(s.tailBits8)
			v := archsimd.LoadFloat64x8Slice(f[i:])
			c := v.Sub(fm8).Masked(mk)
			ss = c.MulAdd(c, ss)
			v.Sub(fm8).Merge(v, mk).StoreSlice(f[i:])
			break
		}
		c := archsimd.LoadFloat64x8Slice(f[i:]).Sub(fm8)
		c.StoreSlice(f[i:])
		ss = c.MulAdd(c, ss)
	}
	ss.Store(&out[0])
	archsimd.ClearAVXUpperBits()
	o := &out[0]
	s.df = math.Sqrt(((o[0] + o[1]) + (o[2] + o[3])) + ((o[4] + o[5]) + (o[6] + o[7])))
	return s.df > 0 && s.df/math.Sqrt(float64(s.n)) >= s.minStd
}

// hessian2v is hessian2m with vector instructions (see prepare2v), on the
// centred subset.
func (s *solver) hessian2v(h *[144]float64) {
	m := s.m
	side := 2*m + 1
	last := side - 8
	xis := s.xis[:side]
	// The copies are read through pointers: k + 8 ≤ s.n for every group.
	_, _, _ = s.f[s.n-1], s.fx[s.n-1], s.fy[s.n-1]
	bF, bFx, bFy := unsafe.Pointer(unsafe.SliceData(s.f)), unsafe.Pointer(unsafe.SliceData(s.fx)), unsafe.Pointer(unsafe.SliceData(s.fy))
	lastMask := archsimd.Mask64x8FromBits(s.lastBits8)
	tw := &s.h2w // tw[q][a][b]: lane sums of w_q ξ^a η^b, a + b ≤ 4
	tb := &s.h2b // tb[q][a][b] for fx f̃, fy f̃, fx, fy, a + b ≤ 2
	*tw = [3][5][5][8]float64{}
	*tb = [4][3][3][8]float64{}
	for g := 0; g < side; g += 8 {
		full := true
		if g > last {
			g, full = last, false
		}
		// Loop A: fx² and fx fy, to the fourth order.
		var a0, a1, a2, a3, a4, b0, b1, b2, b3, b4 archsimd.Float64x8
		for j := side - 1; j >= 0; j-- {
			k := j*side + g
			gx := load8(bFx, k)
			gy := load8(bFy, k)
			if !full {
				gx = gx.Masked(lastMask)
			}
			a0 = gx.MulAdd(gx, a0)
			a1 = a1.Add(a0)
			a2 = a2.Add(a1)
			a3 = a3.Add(a2)
			a4 = a4.Add(a3)
			b0 = gx.MulAdd(gy, b0)
			b1 = b1.Add(b0)
			b2 = b2.Add(b1)
			b3 = b3.Add(b2)
			b4 = b4.Add(b3)
		}
		xi := archsimd.LoadFloat64x8Slice(xis[g:])
		s.colMoments4(&tw[0], a0, a1, a2, a3, a4, xi)
		s.colMoments4(&tw[1], b0, b1, b2, b3, b4, xi)
		// Loop B: fy² to the fourth order, fx f̃ to the second.
		var d0, d1, d2 archsimd.Float64x8
		a0, a1, a2, a3, a4 = archsimd.Float64x8{}, archsimd.Float64x8{}, archsimd.Float64x8{}, archsimd.Float64x8{}, archsimd.Float64x8{}
		for j := side - 1; j >= 0; j-- {
			k := j*side + g
			gx := load8(bFx, k)
			gy := load8(bFy, k)
			v := load8(bF, k)
			if !full {
				gx, gy = gx.Masked(lastMask), gy.Masked(lastMask)
			}
			a0 = gy.MulAdd(gy, a0)
			a1 = a1.Add(a0)
			a2 = a2.Add(a1)
			a3 = a3.Add(a2)
			a4 = a4.Add(a3)
			d0 = gx.MulAdd(v, d0)
			d1 = d1.Add(d0)
			d2 = d2.Add(d1)
		}
		xi = archsimd.LoadFloat64x8Slice(xis[g:])
		s.colMoments4(&tw[2], a0, a1, a2, a3, a4, xi)
		s.colMoments2(&tb[0], d0, d1, d2, xi)
		// Loop C: fy f̃, fx and fy to the second order.
		var e0, e1, e2, u0, u1, u2 archsimd.Float64x8
		d0, d1, d2 = archsimd.Float64x8{}, archsimd.Float64x8{}, archsimd.Float64x8{}
		for j := side - 1; j >= 0; j-- {
			k := j*side + g
			gx := load8(bFx, k)
			gy := load8(bFy, k)
			v := load8(bF, k)
			if !full {
				gx, gy = gx.Masked(lastMask), gy.Masked(lastMask)
			}
			d0 = gy.MulAdd(v, d0)
			d1 = d1.Add(d0)
			d2 = d2.Add(d1)
			e0 = e0.Add(gx)
			e1 = e1.Add(e0)
			e2 = e2.Add(e1)
			u0 = u0.Add(gy)
			u1 = u1.Add(u0)
			u2 = u2.Add(u1)
		}
		xi = archsimd.LoadFloat64x8Slice(xis[g:])
		s.colMoments2(&tb[1], d0, d1, d2, xi)
		s.colMoments2(&tb[2], e0, e1, e2, xi)
		s.colMoments2(&tb[3], u0, u1, u2, xi)
	}
	archsimd.ClearAVXUpperBits()
	lane := func(o *[8]float64) float64 {
		return ((o[0] + o[1]) + (o[2] + o[3])) + ((o[4] + o[5]) + (o[6] + o[7]))
	}
	var mw [3][5][5]float64
	var mb [4][3][3]float64
	for q := range mw {
		for a := 0; a < 5; a++ {
			for b := 0; a+b < 5; b++ {
				mw[q][a][b] = lane(&tw[q][a][b])
			}
		}
	}
	for q := range mb {
		for a := 0; a < 3; a++ {
			for b := 0; a+b < 3; b++ {
				mb[q][a][b] = lane(&tb[q][a][b])
			}
		}
	}
	s.setHessian2(h, &mw, &mb)
}

// colMoments4 adds to d[a][b] (a + b ≤ 4) the moments Σ w ξ^a η^b of one
// group of columns, from the running sums c_k = Σ_j C(j+k, k) w_j down
// each column: Σ_j w_j η^b = Σ_k fromRising[b][k] c_k.
func (s *solver) colMoments4(d *[5][5][8]float64, c0, c1, c2, c3, c4, xi archsimd.Float64x8) {
	r := &s.rising8
	e0 := c0
	e1 := c1.Mul(archsimd.LoadFloat64x8(&r[1][1])).Add(c0.Mul(archsimd.LoadFloat64x8(&r[1][0])))
	e2 := c2.Mul(archsimd.LoadFloat64x8(&r[2][2])).Add(c1.Mul(archsimd.LoadFloat64x8(&r[2][1]))).Add(c0.Mul(archsimd.LoadFloat64x8(&r[2][0])))
	e3 := c3.Mul(archsimd.LoadFloat64x8(&r[3][3])).Add(c2.Mul(archsimd.LoadFloat64x8(&r[3][2]))).Add(c1.Mul(archsimd.LoadFloat64x8(&r[3][1]))).Add(c0.Mul(archsimd.LoadFloat64x8(&r[3][0])))
	e4 := c4.Mul(archsimd.LoadFloat64x8(&r[4][4])).Add(c3.Mul(archsimd.LoadFloat64x8(&r[4][3]))).Add(c2.Mul(archsimd.LoadFloat64x8(&r[4][2]))).Add(c1.Mul(archsimd.LoadFloat64x8(&r[4][1]))).Add(c0.Mul(archsimd.LoadFloat64x8(&r[4][0])))
	// d[a][b] += ξ^a e_b for a + b ≤ 4.
	add := func(p *[8]float64, x archsimd.Float64x8) { archsimd.LoadFloat64x8(p).Add(x).Store(p) }
	add(&d[0][0], e0)
	add(&d[0][1], e1)
	add(&d[0][2], e2)
	add(&d[0][3], e3)
	add(&d[0][4], e4)
	e0, e1, e2, e3 = e0.Mul(xi), e1.Mul(xi), e2.Mul(xi), e3.Mul(xi)
	add(&d[1][0], e0)
	add(&d[1][1], e1)
	add(&d[1][2], e2)
	add(&d[1][3], e3)
	e0, e1, e2 = e0.Mul(xi), e1.Mul(xi), e2.Mul(xi)
	add(&d[2][0], e0)
	add(&d[2][1], e1)
	add(&d[2][2], e2)
	e0, e1 = e0.Mul(xi), e1.Mul(xi)
	add(&d[3][0], e0)
	add(&d[3][1], e1)
	add(&d[4][0], e0.Mul(xi))
}

// colMoments2 is colMoments4 to the second order.
func (s *solver) colMoments2(d *[3][3][8]float64, c0, c1, c2, xi archsimd.Float64x8) {
	r := &s.rising8
	e0 := c0
	e1 := c1.Mul(archsimd.LoadFloat64x8(&r[1][1])).Add(c0.Mul(archsimd.LoadFloat64x8(&r[1][0])))
	e2 := c2.Mul(archsimd.LoadFloat64x8(&r[2][2])).Add(c1.Mul(archsimd.LoadFloat64x8(&r[2][1]))).Add(c0.Mul(archsimd.LoadFloat64x8(&r[2][0])))
	add := func(p *[8]float64, x archsimd.Float64x8) { archsimd.LoadFloat64x8(p).Add(x).Store(p) }
	add(&d[0][0], e0)
	add(&d[0][1], e1)
	add(&d[0][2], e2)
	e0, e1 = e0.Mul(xi), e1.Mul(xi)
	add(&d[1][0], e0)
	add(&d[1][1], e1)
	add(&d[2][0], e0.Mul(xi))
}

// load8 loads the eight float64 at element k of the array at b.
func load8(b unsafe.Pointer, k int) archsimd.Float64x8 {
	return archsimd.LoadFloat64x8((*[8]float64)(unsafe.Add(b, 8*k)))
}

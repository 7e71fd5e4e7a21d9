//go:build goexperiment.simd && amd64

package correlate

import (
	"simd/archsimd"
	"unsafe"
)

// smoothedVarsFast is the smoothedVars factor uses: smoothedVarsV where
// the vector passes run (AVX-512 and FMA, side at least 8), else
// smoothedVars.
func (s *solver) smoothedVarsFast(cu, cv *[12]float64) (vu, vv float64) {
	if vectorPass && !s.portable && 2*s.m+1 >= 8 && len(s.kern) <= maxTaps {
		return s.smoothedVarsV(cu, cv)
	}
	return s.smoothedVars(cu, cv)
}

// smoothedVarsV is smoothedVars with vector instructions, eight samples at
// a time, on the same scratch planes: the steepest-descent images
// wu = J·cu and wv = J·cv (per row, J·c = fx·(c_U + c_Ux ξ + c_Uy η + …) +
// fy·(c_V + …), the polynomials' coefficients in η taken once per row),
// then the horizontal pass of the kernel over each subset row and the
// vertical pass with the sums of squares. A row's last group of eight
// overlaps the one before unless the width is a multiple of eight: its
// repeated lanes are stored again with the same values, and in the sums of
// squares weighted by zero. The result differs from smoothedVars' by
// rounding only (fused multiply-adds, the order of the sums), which
// TestVectorSmoothedVarsMatchPortable bounds.
func (s *solver) smoothedVarsV(cu, cv *[12]float64) (vu, vv float64) {
	m := s.m
	side := 2*m + 1
	kern := s.kern
	r := len(kern) / 2
	ext := side + 2*r
	wide := ext + 2*r
	second := s.np == 12
	// The taps eight times each, before the first vector instruction.
	var kb [maxTaps][8]float64
	for q, k := range kern {
		kb[q] = [8]float64{k, k, k, k, k, k, k, k}
	}
	wu, wv := s.wpad[:side*wide], s.wpad[side*wide:2*side*wide]
	xis := s.xis[:side]
	fxAll, fyAll := s.fx[:s.n], s.fy[:s.n]
	last := side - 8
	half := bc(0.5)
	for j := 0; j < side; j++ {
		// Along row j, J·c = fx·(a + bξ + h ξ²/2) + fy·(d + eξ + k ξ²/2)
		// with a = c_U + c_Uy η + c_Uyy η²/2, b = c_Ux + c_Uxy η, h = c_Uxx,
		// and d, e, k the same of the V entries.
		eta := archsimd.LoadFloat64x8Slice(s.etas8[8*j:])
		e2 := archsimd.LoadFloat64x8Slice(s.etas2h8[8*j:])
		au, bu := bc(cu[Uy]).MulAdd(eta, bc(cu[U])), bc(cu[Ux])
		du, eu := bc(cu[Vy]).MulAdd(eta, bc(cu[V])), bc(cu[Vx])
		av, bv := bc(cv[Uy]).MulAdd(eta, bc(cv[U])), bc(cv[Ux])
		dv, ev := bc(cv[Vy]).MulAdd(eta, bc(cv[V])), bc(cv[Vx])
		if second {
			au, bu = bc(cu[Uyy]).MulAdd(e2, au), bc(cu[Uxy]).MulAdd(eta, bu)
			du, eu = bc(cu[Vyy]).MulAdd(e2, du), bc(cu[Vxy]).MulAdd(eta, eu)
			av, bv = bc(cv[Uyy]).MulAdd(e2, av), bc(cv[Uxy]).MulAdd(eta, bv)
			dv, ev = bc(cv[Vyy]).MulAdd(e2, dv), bc(cv[Vxy]).MulAdd(eta, ev)
		}
		row := wu[j*wide+2*r : j*wide+2*r+side]
		rowv := wv[j*wide+2*r : j*wide+2*r+side]
		for g := 0; g < side; g += 8 {
			g = min(g, last)
			xi := archsimd.LoadFloat64x8Slice(xis[g:])
			fx := archsimd.LoadFloat64x8Slice(fxAll[j*side+g:])
			fy := archsimd.LoadFloat64x8Slice(fyAll[j*side+g:])
			pu, qu := bu.MulAdd(xi, au), eu.MulAdd(xi, du)
			pv, qv := bv.MulAdd(xi, av), ev.MulAdd(xi, dv)
			if second {
				xx := xi.Mul(xi).Mul(half)
				pu, qu = bc(cu[Uxx]).MulAdd(xx, pu), bc(cu[Vxx]).MulAdd(xx, qu)
				pv, qv = bc(cv[Uxx]).MulAdd(xx, pv), bc(cv[Vxx]).MulAdd(xx, qv)
			}
			fy.MulAdd(qu, fx.Mul(pu)).StoreSlice(row[g:])
			fy.MulAdd(qv, fx.Mul(pv)).StoreSlice(rowv[g:])
		}
	}
	// The horizontal pass: row j of wu, wv to row 2r + j of tu, tv. The
	// planes are read through pointers: every sample read lies in them,
	// as in smoothedVars (rows of wide = ext + 2r samples for ext outputs,
	// ext + 2r rows of ext samples for ext rows of outputs).
	tu, tv := s.wtmp[:wide*ext], s.wtmp[wide*ext:2*wide*ext]
	n := len(kern)
	lastX := ext - 8
	bu, bv := unsafe.Pointer(unsafe.SliceData(wu)), unsafe.Pointer(unsafe.SliceData(wv))
	for j := 0; j < side; j++ {
		du, dv := tu[(2*r+j)*ext:(2*r+j+1)*ext], tv[(2*r+j)*ext:(2*r+j+1)*ext]
		x := 0
		for ; x+16 <= ext; x += 16 {
			o := uintptr(8 * (j*wide + x))
			a0, a1, b0, b1 := conv4(unsafe.Add(bu, o), unsafe.Add(bv, o), 8, &kb, n)
			a0.StoreSlice(du[x:])
			a1.StoreSlice(du[x+8:])
			b0.StoreSlice(dv[x:])
			b1.StoreSlice(dv[x+8:])
		}
		for ; x < ext; x += 8 {
			x = min(x, lastX)
			o := uintptr(8 * (j*wide + x))
			a, b := conv2(unsafe.Add(bu, o), unsafe.Add(bv, o), 8, &kb, n)
			a.StoreSlice(du[x:])
			b.StoreSlice(dv[x:])
		}
	}
	// The vertical pass and the sums of squares; where the last group of a
	// row overlaps the one before, its lanes below ext&^7 are left out.
	var tailBits uint8
	for l := range 8 {
		if lastX+l >= ext&^7 {
			tailBits |= 1 << l
		}
	}
	tail := archsimd.Mask64x8FromBits(tailBits)
	var ssu, ssv archsimd.Float64x8
	cu0, cv0 := unsafe.Pointer(unsafe.SliceData(tu)), unsafe.Pointer(unsafe.SliceData(tv))
	rowStep := uintptr(8 * ext)
	for y := 0; y < ext; y++ {
		x := 0
		for ; x+16 <= ext; x += 16 {
			o := uintptr(8 * (y*ext + x))
			a0, a1, b0, b1 := conv4(unsafe.Add(cu0, o), unsafe.Add(cv0, o), rowStep, &kb, n)
			ssu, ssv = a0.MulAdd(a0, ssu), b0.MulAdd(b0, ssv)
			ssu, ssv = a1.MulAdd(a1, ssu), b1.MulAdd(b1, ssv)
		}
		for ; x < ext; x += 8 {
			full := x <= lastX
			x = min(x, lastX)
			o := uintptr(8 * (y*ext + x))
			a, b := conv2(unsafe.Add(cu0, o), unsafe.Add(cv0, o), rowStep, &kb, n)
			if !full {
				a, b = a.Masked(tail), b.Masked(tail)
			}
			ssu, ssv = a.MulAdd(a, ssu), b.MulAdd(b, ssv)
		}
	}
	out := &s.pout
	ssu.Store(&out[0])
	ssv.Store(&out[1])
	archsimd.ClearAVXUpperBits()
	o, p := &out[0], &out[1]
	vu = ((o[0] + o[1]) + (o[2] + o[3])) + ((o[4] + o[5]) + (o[6] + o[7]))
	vv = ((p[0] + p[1]) + (p[2] + p[3])) + ((p[4] + p[5]) + (p[6] + p[7]))
	return vu, vv
}

// maxTaps is the longest prefilter kernel smoothedVarsV takes (σ up to
// 5 px); smoothedVarsFast leaves longer ones to smoothedVars.
const maxTaps = 31

// conv2 returns Σ_q kern[q]·x[q·step] for the eight samples at pu and at
// pv (the same place in the other plane), kb holding the n taps eight
// times each; step is in bytes.
func conv2(pu, pv unsafe.Pointer, step uintptr, kb *[maxTaps][8]float64, n int) (a, b archsimd.Float64x8) {
	k := archsimd.LoadFloat64x8(&kb[0])
	a = archsimd.LoadFloat64x8((*[8]float64)(pu)).Mul(k)
	b = archsimd.LoadFloat64x8((*[8]float64)(pv)).Mul(k)
	for q := 1; q < n; q++ {
		pu, pv = unsafe.Add(pu, step), unsafe.Add(pv, step)
		k = archsimd.LoadFloat64x8(&kb[q])
		a = archsimd.LoadFloat64x8((*[8]float64)(pu)).MulAdd(k, a)
		b = archsimd.LoadFloat64x8((*[8]float64)(pv)).MulAdd(k, b)
	}
	return a, b
}

// conv4 is conv2 for the sixteen samples at pu and pv: a0, b0 the first
// eight, a1, b1 the next (four independent sums share each tap's load).
func conv4(pu, pv unsafe.Pointer, step uintptr, kb *[maxTaps][8]float64, n int) (a0, a1, b0, b1 archsimd.Float64x8) {
	k := archsimd.LoadFloat64x8(&kb[0])
	a0 = archsimd.LoadFloat64x8((*[8]float64)(pu)).Mul(k)
	a1 = archsimd.LoadFloat64x8((*[8]float64)(unsafe.Add(pu, 64))).Mul(k)
	b0 = archsimd.LoadFloat64x8((*[8]float64)(pv)).Mul(k)
	b1 = archsimd.LoadFloat64x8((*[8]float64)(unsafe.Add(pv, 64))).Mul(k)
	for q := 1; q < n; q++ {
		pu, pv = unsafe.Add(pu, step), unsafe.Add(pv, step)
		k = archsimd.LoadFloat64x8(&kb[q])
		a0 = archsimd.LoadFloat64x8((*[8]float64)(pu)).MulAdd(k, a0)
		a1 = archsimd.LoadFloat64x8((*[8]float64)(unsafe.Add(pu, 64))).MulAdd(k, a1)
		b0 = archsimd.LoadFloat64x8((*[8]float64)(pv)).MulAdd(k, b0)
		b1 = archsimd.LoadFloat64x8((*[8]float64)(unsafe.Add(pv, 64))).MulAdd(k, b1)
	}
	return a0, a1, b0, b1
}

// bc broadcasts x to eight lanes.
func bc(x float64) archsimd.Float64x8 { return archsimd.BroadcastFloat64x8(x) }

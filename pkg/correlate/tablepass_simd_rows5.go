//go:build goexperiment.simd && amd64

package correlate

import (
	"simd/archsimd"
	"unsafe"
)

// The vector passes' interpolation from a quintic row table
// (spline.QuinticRowTable): for each pixel the six row polynomials of
// coefficient rows y−2 … y+3 over its cell, 6 float32 each (coefficients
// of tx⁰ … tx⁵). A 512-bit vector holds two pixels' polynomials of one
// table row, lanes (pixel, power of tx) in lanes 0–11 (12–15 unused): one
// load where the two cells are neighbours (almost always along a subset
// row of a small deformation), else two loads put together. Four pixels
// are two such pairs. For each pair the six B-spline weights in ty,
// 120·β⁵(ty + 2 − q), are evaluated by Horner's rule in lanes (pixel, q)
// from their polynomial coefficients (spline's quinticBasis), and the six
// rows are summed with them, each weight spread to its pixel's six lanes;
// the two pairs' sums, the coefficients per power of tx of each pixel, are
// transposed to lanes per pixel and finished by Horner's rule in tx. The
// result is spline.EvalRows5's value (which combines the same rows in the
// same basis, written by powers of ty) to float32 rounding
// (TestVectorRowsMatchEvalRows).

// rows5Consts holds the constant vectors of sampleRows5.
type rows5Consts struct {
	basis  [6][16]float32 // basis[i], lane (p, q): the coefficient of ty^i in 120·β⁵(ty + 2 − q)
	spread [6][16]uint32  // spread[q], lane (p, i) ← lane (p, q)
	tyA    [16]uint32     // lanes (0, i) ← 4, (1, i) ← 5: ty of the first pair's pixels
	tyB    [16]uint32     // the same for the second pair, ← 6, 7
	pick   [6][16]uint32  // pick[i], lane p ← lane (p, i) of the two pairs (the second from 16 on)
}

// rows5 are sampleRows5's constants; never modified.
var rows5 = newRows5Consts()

// quinticBasis5 is spline's quinticBasis: quinticBasis5[q][i] is the
// coefficient of t^i in 120·β⁵(t + 2 − q), the weight of table row q.
var quinticBasis5 = [6][6]float32{
	{1, -5, 10, -10, 5, -1},
	{26, -50, 20, 20, -20, 5},
	{66, 0, -60, 0, 30, -10},
	{26, 50, 20, -20, -20, 10},
	{1, 5, 10, 10, 5, -5},
	{0, 0, 0, 0, 0, 1},
}

func newRows5Consts() *rows5Consts {
	k := &rows5Consts{}
	for l := range 16 {
		p, j := l/6, l%6 // pixel of the pair, and q or i
		if p > 1 {
			p, j = 1, 5 // unused lanes: any lane of the pair
		}
		for i := range 6 {
			k.basis[i][l] = quinticBasis5[j][i]
			k.spread[i][l] = uint32(6*p + i)
		}
		k.tyA[l], k.tyB[l] = uint32(4+p), uint32(6+p)
	}
	for i := range 6 {
		k.pick[i] = [16]uint32{uint32(i), uint32(6 + i), uint32(16 + i), uint32(22 + i)}
	}
	return k
}

// sampleRows5 is sampleRows for the solver's quintic row table: it
// interpolates the subset row whose groups s.rv describe (see sampleRow)
// into s.gbuf.
//
//go:noinline
func (s *solver) sampleRows5(x, y, xL, yL int64) {
	a, w := s.qtab.Coefficients(), s.qtab.W
	n := 2*s.m + 1
	g := s.gbuf[:n+4] // initVector gave it 4 spare elements for the 8-lane stores
	last := n - 4
	rs := 6 * w
	// The table is read without bounds checks: the caller has checked
	// every position against the usable area, 3 px inside the image, so
	// each cell's six row polynomials and the next 10 floats lie in the
	// table, and so do the 6 floats before each cell.
	base, bs := unsafe.Pointer(unsafe.SliceData(a)), uintptr(4*rs)
	offs := &s.offs
	k := rows5
	w4 := archsimd.BroadcastInt64x4(int64(w)).AsUint32x8()
	rv := &s.rv
	mask := archsimd.BroadcastInt64x8(fixMask)
	scale := archsimd.BroadcastFloat32x8(fixScale)
	lo := archsimd.Mask64x8FromBits(0x0f) // lanes 0–3: x
	xy := archsimd.BroadcastInt64x8(x).Merge(archsimd.BroadcastInt64x8(y), lo).Add(archsimd.LoadInt64x8(&rv[0]))
	dxy := archsimd.LoadInt64x8(&rv[2])
	low4 := archsimd.Mask64x8FromBits(0x0f)
	first := archsimd.Mask32x16FromBits(0x003f) // lanes of a pair's first pixel
	for i := 0; i < n; i += 4 {
		if i > last {
			i = last
			xy = archsimd.BroadcastInt64x8(xL).Merge(archsimd.BroadcastInt64x8(yL), lo).Add(archsimd.LoadInt64x8(&rv[1]))
		}
		// Lanes 0–3 tx, 4–7 ty of the four pixels.
		// (The fraction is rounded once to float32, then scaled exactly by
		// 2⁻⁴⁰: the portable passes' float32(frac)·fixScale.)
		t := archsimd.Float32x16{}.SetLo(xy.And(mask).ConvertToFloat32().Mul(scale))
		// Cells ⌊y⌋·w + ⌊x⌋; their first rows (y − 2) start at 6 times that.
		cl := xy.ShiftAllRight(fixBits)
		cl.GetHi().AsUint32x8().MulEvenWiden(w4).AsInt64x4().Add(cl.GetLo()).Store(offs)
		c0, c1, c2, c3 := int(offs[0]), int(offs[1]), int(offs[2]), int(offs[3])
		// The B-spline weights in ty of each pair, lanes (pixel, q).
		ta, tb := t.Permute(archsimd.LoadUint32x16(&k.tyA)), t.Permute(archsimd.LoadUint32x16(&k.tyB))
		wa, wb := weights5(ta, k), weights5(tb, k)
		o0, o1, o2, o3 := 6*c0, 6*c1, 6*c2, 6*c3
		var pa, pb archsimd.Float32x16
		if (c1-c0-1)|(c3-c2-1) == 0 {
			pa = rowsNear5(unsafe.Add(base, 4*o0), bs, wa, k)
			pb = rowsNear5(unsafe.Add(base, 4*o2), bs, wb, k)
		} else {
			pa = rowsFar5(unsafe.Add(base, 4*o0), unsafe.Add(base, 4*o1-24), bs, wa, first, k)
			pb = rowsFar5(unsafe.Add(base, 4*o2), unsafe.Add(base, 4*o3-24), bs, wb, first, k)
		}
		// Horner in tx (lanes 0–3 of t) on the coefficients of each
		// power, lane p for pixel p.
		v := pa.ConcatPermute(pb, archsimd.LoadUint32x16(&k.pick[5]))
		v = v.MulAdd(t, pa.ConcatPermute(pb, archsimd.LoadUint32x16(&k.pick[4])))
		v = v.MulAdd(t, pa.ConcatPermute(pb, archsimd.LoadUint32x16(&k.pick[3])))
		v = v.MulAdd(t, pa.ConcatPermute(pb, archsimd.LoadUint32x16(&k.pick[2])))
		v = v.MulAdd(t, pa.ConcatPermute(pb, archsimd.LoadUint32x16(&k.pick[1])))
		v = v.MulAdd(t, pa.ConcatPermute(pb, archsimd.LoadUint32x16(&k.pick[0])))
		v.GetLo().ConvertToFloat64().StoreMasked((*[8]float64)(g[i:i+8]), low4)
		xy = xy.Add(dxy)
		dxy = dxy.Add(archsimd.LoadInt64x8(&rv[3]))
	}
}

// weights5 returns the B-spline weights 120·β⁵(ty + 2 − q) in lanes
// (pixel, q) of a pair, ty given in each pixel's lanes, by Horner's rule.
func weights5(ty archsimd.Float32x16, k *rows5Consts) archsimd.Float32x16 {
	b := &k.basis
	v := archsimd.LoadFloat32x16(&b[5]).MulAdd(ty, archsimd.LoadFloat32x16(&b[4]))
	v = v.MulAdd(ty, archsimd.LoadFloat32x16(&b[3]))
	v = v.MulAdd(ty, archsimd.LoadFloat32x16(&b[2]))
	v = v.MulAdd(ty, archsimd.LoadFloat32x16(&b[1]))
	return v.MulAdd(ty, archsimd.LoadFloat32x16(&b[0]))
}

// rowsNear5 sums the six table rows of a pair of neighbouring cells, the
// first's polynomials at p, row q at p + q·bs bytes, with the pair's
// weights wt: lanes (pixel, power of tx).
func rowsNear5(p unsafe.Pointer, bs uintptr, wt archsimd.Float32x16, k *rows5Consts) archsimd.Float32x16 {
	sp := &k.spread
	v := load16(p, 0).Mul(wt.Permute(archsimd.LoadUint32x16(&sp[0])))
	v = load16(p, bs).MulAdd(wt.Permute(archsimd.LoadUint32x16(&sp[1])), v)
	v = load16(p, 2*bs).MulAdd(wt.Permute(archsimd.LoadUint32x16(&sp[2])), v)
	v = load16(p, 3*bs).MulAdd(wt.Permute(archsimd.LoadUint32x16(&sp[3])), v)
	v = load16(p, 4*bs).MulAdd(wt.Permute(archsimd.LoadUint32x16(&sp[4])), v)
	return load16(p, 5*bs).MulAdd(wt.Permute(archsimd.LoadUint32x16(&sp[5])), v)
}

// rowsFar5 is rowsNear5 for cells that are not neighbours: the first
// pixel's polynomials at p, the second's 24 bytes after p2, put together in
// lanes 0–5 and 6–11 (first marks lanes 0–5).
func rowsFar5(p, p2 unsafe.Pointer, bs uintptr, wt archsimd.Float32x16, first archsimd.Mask32x16, k *rows5Consts) archsimd.Float32x16 {
	sp := &k.spread
	var v archsimd.Float32x16
	for q := range uintptr(6) {
		r := load16(p, q*bs).Merge(load16(p2, q*bs), first)
		v = r.MulAdd(wt.Permute(archsimd.LoadUint32x16(&sp[q])), v)
	}
	return v
}

// load16 loads the 16 float32 at p + off bytes.
func load16(p unsafe.Pointer, off uintptr) archsimd.Float32x16 {
	return archsimd.LoadFloat32x16((*[16]float32)(unsafe.Add(p, off)))
}

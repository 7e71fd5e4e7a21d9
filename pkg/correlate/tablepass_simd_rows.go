//go:build goexperiment.simd && amd64

package correlate

import (
	"simd/archsimd"
	"unsafe"
)

// The vector passes' interpolation from a row table (spline.RowTable):
// for each pixel the four row polynomials of coefficient rows y−1 … y+2
// over its cell, 4 float32 each (coefficients of tx⁰ … tx³). Four pixels
// of a subset row are held in one 512-bit vector per table row, lanes
// (pixel, power of tx): where the four cells are neighbours in one row
// (almost always along a subset row of a small deformation), that vector
// is one load of 64 bytes; otherwise it is put together from four 16-byte
// loads. The rows are combined by the cubic B-spline basis in ty as in
// spline.EvalRows (its coefficients e₀ … e₃ of ty's powers, here combined
// per power of tx, then Horner's rule in ty), the result is transposed to
// lanes per pixel and finished by Horner's rule in tx across the four
// pixels. The operations are EvalRows' in another order, so the values
// differ from it by float32 rounding only (TestVectorRowsMatchEvalRows).

// sampleRows is sampleRow for the solver's row table: it interpolates the
// subset row whose groups s.rv describe (see sampleRow) into s.gbuf.
//
//go:noinline
func (s *solver) sampleRows(x, y, xL, yL int64) {
	a, w := s.rtab.Coefficients(), s.rtab.W
	n := 2*s.m + 1
	g := s.gbuf[:n+4] // initVector gave it 4 spare elements for the 8-lane stores
	last := n - 4
	stride := 4 * w
	// The table is read without bounds checks: the caller has checked
	// every position against the usable area, inside the image, and each
	// cell's four row polynomials and the next three cells' lie in the table.
	base, bs := unsafe.Pointer(unsafe.SliceData(a)), uintptr(4*stride)
	offs := &s.offs
	w4 := archsimd.BroadcastInt64x4(int64(w)).AsUint32x8()
	rv := &s.rv
	mask := archsimd.BroadcastInt64x8(fixMask)
	scale := archsimd.BroadcastFloat32x8(fixScale)
	lo := archsimd.Mask64x8FromBits(0x0f) // lanes 0–3: x
	xy := archsimd.BroadcastInt64x8(x).Merge(archsimd.BroadcastInt64x8(y), lo).Add(archsimd.LoadInt64x8(&rv[0]))
	dxy := archsimd.LoadInt64x8(&rv[2])
	low4 := archsimd.Mask64x8FromBits(0x0f)
	// A group's coefficients wait for the next group: two neighbouring
	// groups are finished together (finish8), a group without a
	// neighbour after it alone (finish4). pi is the waiting group's first
	// pixel, or −1.
	var pc, pt archsimd.Float32x16
	pi := -1
	for i := 0; i < n; i += 4 {
		if i > last {
			i = last
			xy = archsimd.BroadcastInt64x8(xL).Merge(archsimd.BroadcastInt64x8(yL), lo).Add(archsimd.LoadInt64x8(&rv[1]))
		}
		// Lanes 0–3 tx, 4–7 ty of the four pixels.
		// (The fraction is rounded once to float32, then scaled exactly by
		// 2⁻⁴⁰: the portable passes' float32(frac)·fixScale.)
		t := archsimd.Float32x16{}.SetLo(xy.And(mask).ConvertToFloat32().Mul(scale))
		// Offsets 4·(⌊y⌋·w + ⌊x⌋) of the cells' first rows (y − 1).
		cl := xy.ShiftAllRight(fixBits)
		cl.GetHi().AsUint32x8().MulEvenWiden(w4).AsInt64x4().Add(cl.GetLo()).ShiftAllLeft(2).Store(offs)
		o0, o1, o2, o3 := int(offs[0]), int(offs[1]), int(offs[2]), int(offs[3])
		var r0, r1, r2, r3 archsimd.Float32x16
		if (o1-o0-4)|(o2-o0-8)|(o3-o0-12) == 0 {
			p := unsafe.Add(base, 4*o0)
			r0 = archsimd.LoadFloat32x16((*[16]float32)(p))
			r1 = archsimd.LoadFloat32x16((*[16]float32)(unsafe.Add(p, bs)))
			r2 = archsimd.LoadFloat32x16((*[16]float32)(unsafe.Add(p, 2*bs)))
			r3 = archsimd.LoadFloat32x16((*[16]float32)(unsafe.Add(p, 3*bs)))
		} else {
			r0 = gather4(base, o0, o1, o2, o3)
			r1 = gather4(base, o0+stride, o1+stride, o2+stride, o3+stride)
			r2 = gather4(base, o0+2*stride, o1+2*stride, o2+2*stride, o3+2*stride)
			r3 = gather4(base, o0+3*stride, o1+3*stride, o2+3*stride, o3+3*stride)
		}
		ty := t.Permute(archsimd.LoadUint32x16(&s.rowSpread)) // ty in the four lanes of each pixel
		k := &s.rowK
		three := archsimd.LoadFloat32x16(&k[0])
		// combineRows per power of tx: e0 = (r0 + r2) + 4r1, e1 = 3(r2 − r0),
		// e2 = 3((r0 + r2) − 2r1), e3 = (r3 − r0) + 3(r1 − r2).
		sum := r0.Add(r2)
		e0 := r1.MulAdd(archsimd.LoadFloat32x16(&k[1]), sum)
		e1 := r2.Sub(r0).Mul(three)
		e2 := r1.MulAdd(archsimd.LoadFloat32x16(&k[2]), sum).Mul(three)
		e3 := r1.Sub(r2).MulAdd(three, r3.Sub(r0))
		c := e3.MulAdd(ty, e2).MulAdd(ty, e1).MulAdd(ty, e0)
		switch {
		case pi < 0:
			pc, pt, pi = c, t, i
		case i == pi+4:
			finish8(pc, c, pt, t).Store((*[8]float64)(g[pi : pi+8]))
			pi = -1
		default:
			finish4(pc, pt, s).StoreMasked((*[8]float64)(g[pi:pi+8]), low4)
			pc, pt, pi = c, t, i
		}
		xy = xy.Add(dxy)
		dxy = dxy.Add(archsimd.LoadInt64x8(&rv[3]))
	}
	if pi >= 0 {
		finish4(pc, pt, s).StoreMasked((*[8]float64)(g[pi:pi+8]), low4)
	}
}

// finish4 finishes a group of four pixels: c holds the coefficients of
// each power of tx in lanes (pixel, power), t the tx in lanes 0–3; the
// coefficients are moved to lanes per pixel and summed by Horner's rule in
// tx. The result, in lanes 0–3, in float64.
func finish4(c, t archsimd.Float32x16, s *solver) archsimd.Float64x8 {
	c0 := c.Permute(archsimd.LoadUint32x16(&s.rowPick[0]))
	c1 := c.Permute(archsimd.LoadUint32x16(&s.rowPick[1]))
	c2 := c.Permute(archsimd.LoadUint32x16(&s.rowPick[2]))
	c3 := c.Permute(archsimd.LoadUint32x16(&s.rowPick[3]))
	return c3.MulAdd(t, c2).MulAdd(t, c1).MulAdd(t, c0).GetLo().ConvertToFloat64()
}

// finish8 is finish4 for two neighbouring groups at once, a's pixels in
// lanes 0–3 of the result and b's in 4–7: the same operations on each
// pixel's values, half the permutes and multiply-adds per pixel.
func finish8(ca, cb, ta, tb archsimd.Float32x16) archsimd.Float64x8 {
	k := &rows4
	t := ta.ConcatPermute(tb, archsimd.LoadUint32x16(&k.tx))
	c0 := ca.ConcatPermute(cb, archsimd.LoadUint32x16(&k.pick[0]))
	c1 := ca.ConcatPermute(cb, archsimd.LoadUint32x16(&k.pick[1]))
	c2 := ca.ConcatPermute(cb, archsimd.LoadUint32x16(&k.pick[2]))
	c3 := ca.ConcatPermute(cb, archsimd.LoadUint32x16(&k.pick[3]))
	return c3.MulAdd(t, c2).MulAdd(t, c1).MulAdd(t, c0).GetLo().ConvertToFloat64()
}

// rows4Consts holds finish8's index vectors.
type rows4Consts struct {
	tx   [16]uint32    // lanes 0–3 ← lanes 0–3 of a, 4–7 ← lanes 0–3 of b (16 on)
	pick [4][16]uint32 // pick[i]: lane p ← lane (p, i) of a, lane 4 + p ← of b
}

// rows4 are finish8's constants; never modified.
var rows4 = func() rows4Consts {
	var k rows4Consts
	for p := range 4 {
		k.tx[p], k.tx[4+p] = uint32(p), uint32(16+p)
		for i := range 4 {
			k.pick[i][p], k.pick[i][4+p] = uint32(4*p+i), uint32(16+4*p+i)
		}
	}
	return k
}()

// gather4 puts the four row polynomials at elements o0, o1, o2, o3 of the
// table at base into one vector, lanes (pixel, power of tx).
func gather4(base unsafe.Pointer, o0, o1, o2, o3 int) archsimd.Float32x16 {
	lo := archsimd.Float32x8{}.SetLo(load4(base, o0)).SetHi(load4(base, o1))
	hi := archsimd.Float32x8{}.SetLo(load4(base, o2)).SetHi(load4(base, o3))
	return archsimd.Float32x16{}.SetLo(lo).SetHi(hi)
}

// load4 loads the four float32 at element o of the table at base.
func load4(base unsafe.Pointer, o int) archsimd.Float32x4 {
	return archsimd.LoadFloat32x4((*[4]float32)(unsafe.Add(base, 4*o)))
}

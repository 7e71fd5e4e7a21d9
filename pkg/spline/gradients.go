package spline

// The gradients of the interpolant sampled at every pixel centre.

import "context"

// SampleGradients returns ∂/∂x and ∂/∂y of the interpolant at every pixel
// centre, row-major with stride W, computed with up to threads goroutines
// (≤ 0: GOMAXPROCS). The values do not depend on threads.
func (s *Image) SampleGradients(ctx context.Context, threads int) (gx, gy []float32, err error) {
	gx = make([]float32, s.W*s.H)
	gy = make([]float32, s.W*s.H)
	err = parallelRows(ctx, s.H, RowChunk, threads, func(y0, y1 int) { s.GradientRows(gx, gy, y0, y1) })
	if err != nil {
		return nil, nil, err
	}
	return gx, gy, nil
}

// GradientRows computes the values of SampleGradients for the rows
// y0 ≤ y < y1 into gx and gy (W·H values each, row-major with stride W).
// Each row gets the same values whichever call computes it.
func (s *Image) GradientRows(gx, gy []float32, y0, y1 int) {
	w := s.W
	// At integer positions t = 0, so the weights are constants.
	var wv, wd []float64
	if s.order == Cubic {
		var a [4]float64
		var b [4]float64
		cubicWeights(0, &a)
		cubicDerivWeights(0, &b)
		wv, wd = a[:3], b[:3] // the fourth weight is zero at t = 0
	} else {
		var a, b [6]float64
		quinticWeights(0, &a)
		quinticDerivWeights(0, &b)
		wv, wd = a[:5], b[:5]
	}
	r := len(wv) / 2 // support radius: nodes −r … r
	cs := s.cs
	// The x sums of coefficient row y+j (value and derivative weights)
	// are computed once per row and kept in a ring of 2r+1 rows; the y
	// sums then combine them in the order −r … r, the same operations as
	// summing each pixel's neighbourhood directly.
	nr := 2*r + 1
	var vs, ds [5][]float64
	buf := make([]float64, 2*nr*w)
	for k := 0; k < nr; k++ {
		vs[k] = buf[2*k*w : (2*k+1)*w : (2*k+1)*w]
		ds[k] = buf[(2*k+1)*w : (2*k+2)*w : (2*k+2)*w]
	}
	xsums := func(yy int, v, d []float64) {
		base := (yy+pad)*cs + pad - r
		if nr == 3 {
			w0, w1, w2 := wv[0], wv[1], wv[2]
			d0, d1, d2 := wd[0], wd[1], wd[2]
			src := s.c[base : base+w+2]
			v, d = v[:w], d[:w]
			for x := range v {
				c0, c1, c2 := src[x], src[x+1], src[x+2]
				a, b := 0.0, 0.0
				a += w0 * c0
				b += d0 * c0
				a += w1 * c1
				b += d1 * c1
				a += w2 * c2
				b += d2 * c2
				v[x], d[x] = a, b
			}
			return
		}
		// quintic
		{
			w0, w1, w2, w3, w4 := wv[0], wv[1], wv[2], wv[3], wv[4]
			d0, d1, d2, d3, d4 := wd[0], wd[1], wd[2], wd[3], wd[4]
			src := s.c[base : base+w+4]
			v, d = v[:w], d[:w]
			for x := range v {
				c := (*[5]float64)(src[x:])
				a, b := 0.0, 0.0
				a += w0 * c[0]
				b += d0 * c[0]
				a += w1 * c[1]
				b += d1 * c[1]
				a += w2 * c[2]
				b += d2 * c[2]
				a += w3 * c[3]
				b += d3 * c[3]
				a += w4 * c[4]
				b += d4 * c[4]
				v[x], d[x] = a, b
			}
		}
	}
	for k := 0; k < nr-1; k++ {
		xsums(y0-r+k, vs[k], ds[k])
	}
	for y := y0; y < y1; y++ {
		k := (y - y0 + nr - 1) % nr
		xsums(y+r, vs[k], ds[k])
		var vr, dr [5][]float64 // rows y−r … y+r
		for j := 0; j < nr; j++ {
			q := (y - y0 + j) % nr
			vr[j], dr[j] = vs[q][:w], ds[q][:w]
		}
		ox, oy := gx[y*w:(y+1)*w], gy[y*w:(y+1)*w]
		if nr == 3 {
			w0, w1, w2 := wv[0], wv[1], wv[2]
			d0, d1, d2 := wd[0], wd[1], wd[2]
			v0, v1, v2 := vr[0], vr[1], vr[2]
			e0, e1, e2 := dr[0], dr[1], dr[2]
			oy = oy[:len(ox)]
			v0, v1, v2 = v0[:len(ox)], v1[:len(ox)], v2[:len(ox)]
			e0, e1, e2 = e0[:len(ox)], e1[:len(ox)], e2[:len(ox)]
			for x := range ox {
				sx, sy := 0.0, 0.0
				sx += w0 * e0[x]
				sy += d0 * v0[x]
				sx += w1 * e1[x]
				sy += d1 * v1[x]
				sx += w2 * e2[x]
				sy += d2 * v2[x]
				ox[x] = float32(sx)
				oy[x] = float32(sy)
			}
			continue
		}
		// quintic
		{
			w0, w1, w2, w3, w4 := wv[0], wv[1], wv[2], wv[3], wv[4]
			d0, d1, d2, d3, d4 := wd[0], wd[1], wd[2], wd[3], wd[4]
			v0, v1, v2, v3, v4 := vr[0], vr[1], vr[2], vr[3], vr[4]
			e0, e1, e2, e3, e4 := dr[0], dr[1], dr[2], dr[3], dr[4]
			n := len(ox)
			oy = oy[:n]
			v0, v1, v2, v3, v4 = v0[:n], v1[:n], v2[:n], v3[:n], v4[:n]
			e0, e1, e2, e3, e4 = e0[:n], e1[:n], e2[:n], e3[:n], e4[:n]
			for x := range ox {
				sx, sy := 0.0, 0.0
				sx += w0 * e0[x]
				sy += d0 * v0[x]
				sx += w1 * e1[x]
				sy += d1 * v1[x]
				sx += w2 * e2[x]
				sy += d2 * v2[x]
				sx += w3 * e3[x]
				sy += d3 * v3[x]
				sx += w4 * e4[x]
				sy += d4 * v4[x]
				ox[x] = float32(sx)
				oy[x] = float32(sy)
			}
		}
	}
}

package correlate

import "math"

// jacobian writes the steepest-descent vector of one pixel at offset (ξ, η).
func (s *solver) jacobian(fx, fy, xi, eta float64, j *[12]float64) {
	j[U], j[Ux], j[Uy] = fx, fx*xi, fx*eta
	j[V], j[Vx], j[Vy] = fy, fy*xi, fy*eta
	if s.np == 12 {
		xx, xy, yy := xi*xi/2, xi*eta, eta*eta/2
		j[Uxx], j[Uxy], j[Uyy] = fx*xx, fx*xy, fx*yy
		j[Vxx], j[Vxy], j[Vyy] = fy*xx, fy*xy, fy*yy
	}
}

// prepare loads the reference subset centred at (xc, yc) and computes the
// Hessian and its Cholesky factor. It returns OK, Outside (the subset leaves
// the reference image) or LowContrast.
func (s *solver) prepare(xc, yc float64) Status {
	m := s.m
	s.xc, s.yc = xc, yc
	ix, iy := int(xc), int(yc)
	onGrid := float64(ix) == xc && float64(iy) == yc
	if xc-float64(m) < 0 || yc-float64(m) < 0 || xc+float64(m) > float64(s.ref.W-1) || yc+float64(m) > float64(s.ref.H-1) {
		return Outside
	}
	if !onGrid && s.refSp == nil {
		return Outside
	}
	if onGrid && s.np == 6 {
		return s.prepare1fast(ix, iy)
	}
	if onGrid {
		return s.prepare2fast(ix, iy)
	}
	return s.prepareAny(false)
}

// prepareAny is prepare for any centre (on the pixel grid or not, given
// by onGrid) and either warp, after the checks of prepare.
func (s *solver) prepareAny(onGrid bool) Status {
	m := s.m
	xc, yc := s.xc, s.yc
	ix, iy := int(xc), int(yc)
	var sum float64
	side := 2*m + 1
	k := 0
	for j := -m; j <= m; j++ {
		f, fx, fy := s.f[k:k+side], s.fx[k:k+side], s.fy[k:k+side]
		if onGrid {
			o := (iy+j)*s.ref.Stride + ix - m
			pix := s.ref.Pix[o : o+side]
			o = (iy+j)*s.ref.W + ix - m
			gx, gy := s.gx[o:o+side], s.gy[o:o+side]
			pix, gx, gy = pix[:len(f)], gx[:len(f)], gy[:len(f)]
			fx, fy = fx[:len(f)], fy[:len(f)]
			for i, v := range pix {
				f[i], fx[i], fy[i] = float64(v), float64(gx[i]), float64(gy[i])
				sum += f[i]
			}
		} else {
			for i := range f {
				f[i], fx[i], fy[i] = s.refSp.Grad(xc+float64(i-m), yc+float64(j))
				sum += f[i]
			}
		}
		k += side
	}
	s.fmean = sum / float64(s.n)
	var ss float64
	for k := range s.f {
		s.f[k] -= s.fmean
		ss += s.f[k] * s.f[k]
	}
	s.df = math.Sqrt(ss)
	if !(s.df > 0) || s.df/math.Sqrt(float64(s.n)) < s.minStd {
		return LowContrast
	}
	var h [12 * 12]float64
	s.b0, s.sj = [12]float64{}, [12]float64{}
	if s.np == 6 {
		s.hessian1(&h)
	} else {
		s.hessian2m(&h)
	}
	return s.factor(&h)
}

// factor factors the Hessian h (upper triangle) and sets the entries of its
// inverse used for the predicted std. It returns OK or LowContrast.
func (s *solver) factor(h *[144]float64) Status {
	np := s.np
	if !cholesky(h, np, &s.chol) {
		return LowContrast
	}
	var eu, ev [12]float64
	eu[U], ev[V] = 1, 1
	cholSolve(&s.chol, np, &eu)
	cholSolve(&s.chol, np, &ev)
	s.hUU, s.hVV = eu[U], ev[V]
	if s.kern != nil {
		s.hUU, s.hVV = s.smoothedVarsFast(&eu, &ev)
	}
	return OK
}

// prepare1 is prepare for the first-order warp and a subset centred on the
// pixel (ix, iy), the case of every grid point. It reads the subset twice.
// The first pass copies the samples and gradients, sums the samples and
// takes the Hessian's row sums (hessian1's running sums from the right
// end of each row); the second, once f̄ is known, centres the samples and
// takes ‖f − f̄‖² and the row sums of Σ J f̃ and Σ J. With the running sums
// each pass keeps at most 13 values live, so that they stay in registers. The sums differ from hessian1's by rounding
// only, which TestPrepare1MatchesGeneral bounds.
func (s *solver) prepare1(ix, iy int) Status {
	m := s.m
	side := 2*m + 1
	cc := float64(m + 1)
	n := float64(s.n)
	stride, w := s.ref.Stride, s.ref.W
	var sum float64
	var rxx, rxy, ryy [3][3]float64 // rising basis in ξ, see fromRising2
	k := 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		f, fx, fy := s.f[k:k+side], s.fx[k:k+side], s.fy[k:k+side]
		o := (iy+j)*stride + ix - m
		pix := s.ref.Pix[o : o+side]
		o = (iy+j)*w + ix - m
		gxs, gys := s.gx[o:o+side], s.gy[o:o+side]
		pix, gxs, gys = pix[:len(f)], gxs[:len(f)], gys[:len(f)]
		fx, fy = fx[:len(f)], fy[:len(f)]
		var rs, xx0, xx1, xx2, xy0, xy1, xy2, yy0, yy1, yy2 float64
		for i := len(f) - 1; i >= 0; i-- {
			v, gx, gy := float64(pix[i]), float64(gxs[i]), float64(gys[i])
			f[i], fx[i], fy[i] = v, gx, gy
			rs += v
			xx0 += gx * gx
			xx1 += xx0
			xx2 += xx1
			xy0 += gx * gy
			xy1 += xy0
			xy2 += xy1
			yy0 += gy * gy
			yy1 += yy0
			yy2 += yy1
		}
		sum += rs
		acc2(&rxx, xx0, xx1, xx2, eta, eta*eta)
		acc2(&rxy, xy0, xy1, xy2, eta, eta*eta)
		acc2(&ryy, yy0, yy1, yy2, eta, eta*eta)
		k += side
	}
	hxx, hxy, hyy := fromRising2(&rxx, cc), fromRising2(&rxy, cc), fromRising2(&ryy, cc)
	fm := sum / n
	s.fmean = fm
	var bx, by, jx, jy [2][2]float64 // a+b ≤ 1
	var ss float64
	k = 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		f, fx, fy := s.f[k:k+side], s.fx[k:k+side], s.fy[k:k+side]
		fx, fy = fx[:len(f)], fy[:len(f)]
		var bx0, bx1, by0, by1, jx0, jx1, jy0, jy1 float64
		for i := len(f) - 1; i >= 0; i-- {
			gx, gy, v := fx[i], fy[i], f[i]-fm
			f[i] = v
			ss += v * v
			bx0 += gx * v
			bx1 += bx0
			by0 += gy * v
			by1 += by0
			jx0 += gx
			jx1 += jx0
			jy0 += gy
			jy1 += jy0
		}
		addRow1(&bx, cc, eta, bx0, bx1)
		addRow1(&by, cc, eta, by0, by1)
		addRow1(&jx, cc, eta, jx0, jx1)
		addRow1(&jy, cc, eta, jy0, jy1)
		k += side
	}
	s.df = math.Sqrt(ss)
	if !(s.df > 0) || s.df/math.Sqrt(n) < s.minStd {
		return LowContrast
	}
	var h [144]float64
	s.setHessian1(&h, &hxx, &hxy, &hyy)
	for a, pw := range pow1 {
		bb, jj := &bx, &jx
		if a >= 3 {
			bb, jj = &by, &jy
		}
		s.b0[a] = bb[pw[0]][pw[1]]
		s.sj[a] = jj[pw[0]][pw[1]]
	}
	for a := 6; a < 12; a++ {
		s.b0[a], s.sj[a] = 0, 0
	}
	return s.factor(&h)
}

// fromRising2 returns the moments h[a][b] = Σ w ξ^a η^b (a + b ≤ 2) from
// the sums over the rows r[k][b] = Σ c_k η^b of the running sums c_k of
// each row (c0 = Σ w, c1 = Σ (i+1) w, c2 = Σ (i+1)(i+2)/2 w) as addRow2
// computes them row by row, here once for the whole subset (the change of
// basis is linear); cc = m + 1.
func fromRising2(r *[3][3]float64, cc float64) [3][3]float64 {
	var h [3][3]float64
	s0, s1 := r[0][0], r[1][0]-cc*r[0][0]
	h[0][0], h[1][0] = s0, s1
	h[2][0] = 2*r[2][0] - (2*cc+1)*s1 - cc*(cc+1)*s0
	h[0][1], h[1][1] = r[0][1], r[1][1]-cc*r[0][1]
	h[0][2] = r[0][2]
	return h
}

// pow1 lists the powers of ξ and η in the first-order steepest-descent
// vector J = [fx, fx ξ, fx η, fy, fy ξ, fy η].
var pow1 = [6][2]int{{0, 0}, {1, 0}, {0, 1}, {0, 0}, {1, 0}, {0, 1}}

// setHessian1 fills the upper triangle of the first-order H from the
// moments Σ w ξ^a η^b of w = fx², fx fy, fy², and sets sssig.
func (s *solver) setHessian1(h *[144]float64, hxx, hxy, hyy *[3][3]float64) {
	// Entry (a, b) is Σ w ξ^(pa+pb) η^(qa+qb).
	for a := 0; a < 6; a++ {
		for b := a; b < 6; b++ {
			src := hxx
			switch {
			case a < 3 && b >= 3:
				src = hxy
			case a >= 3:
				src = hyy
			}
			h[a*12+b] = src[pow1[a][0]+pow1[b][0]][pow1[a][1]+pow1[b][1]]
		}
	}
	s.sssig = math.Min(hxx[0][0], hyy[0][0])
}

// smoothedVars returns Var(hᵀΔp)/(2σ²) for the two combinations cu and cv
// (the rows of H⁻¹ for u and v) when both images were smoothed by the
// separable kernel s.kern before correlation, σ being the noise of the
// unsmoothed images. The linearised IC-GN update is Δp = H⁻¹ Jᵀ G(n₁ − n₂)
// with G the smoothing, so the variance of the combination c = H⁻¹h-weighted
// steepest-descent image w = J·c is 2σ²‖Gw‖² (G symmetric). Without
// smoothing this reduces to hᵀH⁻¹h, the usual (H⁻¹)_uu.
//
// Gw is computed over the subset grown by the kernel radius r on every
// side: a horizontal pass over the subset's rows, then a vertical pass.
// The scratch planes carry r zero samples beyond each end, so no index is
// tested in the loops; each output sample is the sum over the kernel in
// order, as it would be with the out-of-range terms left out.
func (s *solver) smoothedVars(cu, cv *[12]float64) (vu, vv float64) {
	m := s.m
	side := 2*m + 1
	kern := s.kern
	r := len(kern) / 2
	ext := side + 2*r
	wide := ext + 2*r
	// wu, wv: side rows of width wide, w at column 2r + i (i = 0 … side−1).
	wu, wv := s.wpad[:side*wide], s.wpad[side*wide:2*side*wide]
	k := 0
	for j := 0; j < side; j++ {
		ru, rv := wu[j*wide+2*r:j*wide+2*r+side], wv[j*wide+2*r:j*wide+2*r+side]
		s.steepestRow(cu, cv, s.fx[k:k+side], s.fy[k:k+side], float64(j-m), ru, rv)
		k += side
	}
	// tu, tv: ext + 2r rows of width ext; the horizontal pass of subset
	// row j goes to row 2r + j, the others stay zero. Both passes take
	// four outputs at a time, each summed over the kernel in order.
	tu, tv := s.wtmp[:wide*ext], s.wtmp[wide*ext:2*wide*ext]
	nk := len(kern)
	for j := 0; j < side; j++ {
		su, sv := wu[j*wide:(j+1)*wide], wv[j*wide:(j+1)*wide]
		du, dv := tu[(2*r+j)*ext:(2*r+j+1)*ext], tv[(2*r+j)*ext:(2*r+j+1)*ext]
		x := 0
		for ; x+4 <= len(du); x += 4 {
			xu, xv := su[x:x+nk+3], sv[x:x+nk+3]
			var a0, a1, a2, a3, b0, b1, b2, b3 float64
			for q, kq := range kern {
				yu, yv := xu[q:q+4], xv[q:q+4]
				a0 += kq * yu[0]
				a1 += kq * yu[1]
				a2 += kq * yu[2]
				a3 += kq * yu[3]
				b0 += kq * yv[0]
				b1 += kq * yv[1]
				b2 += kq * yv[2]
				b3 += kq * yv[3]
			}
			d, e := du[x:x+4], dv[x:x+4]
			d[0], d[1], d[2], d[3] = a0, a1, a2, a3
			e[0], e[1], e[2], e[3] = b0, b1, b2, b3
		}
		for ; x < len(du); x++ {
			xu, xv := su[x:x+nk], sv[x:x+nk]
			var a, b float64
			for q, kq := range kern {
				a += kq * xu[q]
				b += kq * xv[q]
			}
			du[x], dv[x] = a, b
		}
	}
	// Rows of tu outside 2r … 2r+side−1 are zero: the vertical pass of
	// output row y leaves out their terms (adding +0 changes no sum).
	for y := 0; y < ext; y++ {
		qlo, qhi := max(0, 2*r-y), min(2*r, 2*r+side-1-y)
		ky := kern[qlo : qhi+1]
		x := 0
		for ; x+4 <= ext; x += 4 {
			var a0, a1, a2, a3, b0, b1, b2, b3 float64
			o := (y+qlo)*ext + x
			for _, kq := range ky {
				yu, yv := tu[o:o+4], tv[o:o+4]
				a0 += kq * yu[0]
				a1 += kq * yu[1]
				a2 += kq * yu[2]
				a3 += kq * yu[3]
				b0 += kq * yv[0]
				b1 += kq * yv[1]
				b2 += kq * yv[2]
				b3 += kq * yv[3]
				o += ext
			}
			vu += a0 * a0
			vu += a1 * a1
			vu += a2 * a2
			vu += a3 * a3
			vv += b0 * b0
			vv += b1 * b1
			vv += b2 * b2
			vv += b3 * b3
		}
		for ; x < ext; x++ {
			var a, b float64
			for q, kq := range ky {
				a += kq * tu[(y+qlo+q)*ext+x]
				b += kq * tv[(y+qlo+q)*ext+x]
			}
			vu += a * a
			vv += b * b
		}
	}
	return vu, vv
}

// steepestRow writes the combinations J·cu and J·cv of the steepest-descent
// vector J (jacobian) of each pixel of the subset row η = eta, whose
// gradients are fx and fy, to ru and rv: the products of jacobian summed in
// the order of the parameters, as Σ_q J_q c_q term by term.
func (s *solver) steepestRow(cu, cv *[12]float64, fx, fy []float64, eta float64, ru, rv []float64) {
	fx, fy, rv = fx[:len(ru)], fy[:len(ru)], rv[:len(ru)]
	xis := s.xis[:len(ru)]
	if s.np == 6 {
		for i, xi := range xis {
			gx, gy := fx[i], fy[i]
			j1, j2, j4, j5 := gx*xi, gx*eta, gy*xi, gy*eta
			ru[i] = gx*cu[U] + j1*cu[Ux] + j2*cu[Uy] + gy*cu[V] + j4*cu[Vx] + j5*cu[Vy]
			rv[i] = gx*cv[U] + j1*cv[Ux] + j2*cv[Uy] + gy*cv[V] + j4*cv[Vx] + j5*cv[Vy]
		}
		return
	}
	yy := eta * eta / 2
	for i, xi := range xis {
		gx, gy := fx[i], fy[i]
		xx, xy := xi*xi/2, xi*eta
		j1, j2, j4, j5 := gx*xi, gx*eta, gy*xi, gy*eta
		j6, j7, j8 := gx*xx, gx*xy, gx*yy
		j9, j10, j11 := gy*xx, gy*xy, gy*yy
		ru[i] = gx*cu[U] + j1*cu[Ux] + j2*cu[Uy] + gy*cu[V] + j4*cu[Vx] + j5*cu[Vy] +
			j6*cu[Uxx] + j7*cu[Uxy] + j8*cu[Uyy] + j9*cu[Vxx] + j10*cu[Vxy] + j11*cu[Vyy]
		rv[i] = gx*cv[U] + j1*cv[Ux] + j2*cv[Uy] + gy*cv[V] + j4*cv[Vx] + j5*cv[Vy] +
			j6*cv[Uxx] + j7*cv[Uxy] + j8*cv[Uyy] + j9*cv[Vxx] + j10*cv[Vxy] + j11*cv[Vyy]
	}
}

// prepare2 is prepare for the second-order warp and a subset centred on
// the pixel (ix, iy): prepareAny and hessian2m fused, as prepare1 fuses
// prepareAny and hessian1. The first pass copies the samples and
// gradients, sums the samples and takes hessian2m's running sums of fx²,
// fx fy (one loop) and of fy², fx, fy (another) along each row; the
// second, once f̄ is known, centres the samples and takes ‖f − f̄‖² and the
// running sums of fx f̃ and fy f̃. The sums differ from hessian2m's by
// rounding only, which TestPrepare2MatchesGeneral bounds.
func (s *solver) prepare2(ix, iy int) Status {
	m := s.m
	side := 2*m + 1
	n := float64(s.n)
	stride, w := s.ref.Stride, s.ref.W
	var rw [3][5][5]float64  // as in hessian2m
	var rbw [4][3][3]float64 // as in hessian2m
	var sum float64
	k := 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		f, fx, fy := s.f[k:k+side], s.fx[k:k+side], s.fy[k:k+side]
		o := (iy+j)*stride + ix - m
		pix := s.ref.Pix[o : o+side]
		o = (iy+j)*w + ix - m
		var q rowSums2
		copyRow2(&q, pix, s.gx[o:o+side], s.gy[o:o+side], f, fx, fy)
		sum += q.rs
		p1 := eta
		p2 := p1 * eta
		p3 := p2 * eta
		p4 := p3 * eta
		accRow2(&rw, &rbw, &q, p1, p2, p3, p4)
		k += side
	}
	fm := sum / n
	s.fmean = fm
	var ss float64
	k = 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		f, fx, fy := s.f[k:k+side], s.fx[k:k+side], s.fy[k:k+side]
		fx, fy = fx[:len(f)], fy[:len(f)]
		var d0, d1, d2, e0, e1, e2 float64
		for i := len(f) - 1; i >= 0; i-- {
			v := f[i] - fm
			f[i] = v
			ss += v * v
			d0 += fx[i] * v
			d1 += d0
			d2 += d1
			e0 += fy[i] * v
			e1 += e0
			e2 += e1
		}
		acc2(&rbw[0], d0, d1, d2, eta, eta*eta)
		acc2(&rbw[1], e0, e1, e2, eta, eta*eta)
		k += side
	}
	s.df = math.Sqrt(ss)
	if !(s.df > 0) || s.df/math.Sqrt(n) < s.minStd {
		return LowContrast
	}
	var h [144]float64
	s.risingToMoments(&h, &rw, &rbw)
	return s.factor(&h)
}

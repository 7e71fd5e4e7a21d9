package correlate

import "math"

// addRow2 adds one subset row at η = eta to dst[a][b] = Σ w ξ^a η^b
// (a+b ≤ 2), from the running sums of a weight w taken from the row's right
// end (s0 = Σ w, c1 = Σ (i+1) w, c2 = Σ (i+1)(i+2)/2 w, see hessian1) and
// cc = m + 1: with u = i + 1 = ξ + cc, Σ ξ w = c1 − cc s0 and
// Σ ξ² w = 2 c2 − (2cc+1) Σ ξ w − cc(cc+1) s0.
func addRow2(dst *[3][3]float64, cc, eta, s0, c1, c2 float64) {
	s1 := c1 - cc*s0
	s2 := 2*c2 - (2*cc+1)*s1 - cc*(cc+1)*s0
	dst[0][0] += s0
	dst[1][0] += s1
	dst[2][0] += s2
	dst[0][1] += s0 * eta
	dst[1][1] += s1 * eta
	dst[0][2] += s0 * (eta * eta)
}

// addRow1 is addRow2 up to a+b ≤ 1, from the running sums d0 = Σ w and
// d1 = Σ (i+1) w.
func addRow1(dst *[2][2]float64, cc, eta, d0, d1 float64) {
	dst[0][0] += d0
	dst[1][0] += d1 - cc*d0
	dst[0][1] += d0 * eta
}

// hessian1 accumulates the upper triangle of H = Σ JᵀJ, Σ J f̃ and Σ J for
// the first-order warp. Every entry is a sum of w·ξ^a·η^b with w one of
// fx², fx·fy, fy² (or fx f̃, fy f̃, fx, fy), so rows are summed over ξ first
// and weighted by η afterwards.
func (s *solver) hessian1(h *[144]float64) {
	m := s.m
	side := 2*m + 1
	// sums[q][a][b] = Σ w_q ξ^a η^b for q = xx, xy, yy, a+b ≤ 2.
	var hxx, hxy, hyy [3][3]float64
	var bx, by, jx, jy [2][2]float64 // a+b ≤ 1
	k := 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		f := s.f[k : k+side]
		fx := s.fx[k : k+side]
		fy := s.fy[k : k+side]
		fx, fy = fx[:len(f)], fy[:len(f)]
		// r[q][a] = Σ_row w_q ξ^a, by running sums from the right end of
		// the row: after pixel i, c0 = Σ_{i'≥i} w, c1 = Σ_{i'≥i} c0 and
		// c2 = Σ_{i'≥i} c1, so that at the left end c1 = Σ (i+1) w and
		// c2 = Σ (i+1)(i+2)/2 w, from which the moments in ξ = i − m
		// follow. Three additions per weight and pixel instead of two
		// multiplications and three additions. The sums are scalars, in
		// two loops of at most nine, so that they stay in registers (the
		// compiler keeps arrays in memory).
		var xx0, xx1, xx2, xy0, xy1, xy2, yy0, yy1, yy2 float64
		for i := len(f) - 1; i >= 0; i-- {
			gx, gy := fx[i], fy[i]
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
		// The same for fx f̃, fy f̃, fx, fy, up to ξ¹.
		var bx0, bx1, by0, by1, jx0, jx1, jy0, jy1 float64
		for i := len(f) - 1; i >= 0; i-- {
			gx, gy, fv := fx[i], fy[i], f[i]
			bx0 += gx * fv
			bx1 += bx0
			by0 += gy * fv
			by1 += by0
			jx0 += gx
			jx1 += jx0
			jy0 += gy
			jy1 += jy0
		}
		// With u = i + 1 = ξ + c: Σ u w = S1 + c S0 and
		// Σ u(u+1)/2 w = (S2 + (2c+1) S1 + c(c+1) S0)/2.
		cc := float64(m + 1)
		addRow2(&hxx, cc, eta, xx0, xx1, xx2)
		addRow2(&hxy, cc, eta, xy0, xy1, xy2)
		addRow2(&hyy, cc, eta, yy0, yy1, yy2)
		addRow1(&bx, cc, eta, bx0, bx1)
		addRow1(&by, cc, eta, by0, by1)
		addRow1(&jx, cc, eta, jx0, jx1)
		addRow1(&jy, cc, eta, jy0, jy1)
		k += side
	}
	s.setHessian1(h, &hxx, &hxy, &hyy)
	for a, pw := range pow1 {
		bb, jj := &bx, &jx
		if a >= 3 {
			bb, jj = &by, &jy
		}
		s.b0[a] = bb[pw[0]][pw[1]]
		s.sj[a] = jj[pw[0]][pw[1]]
	}
}

// hessian2 is hessian1 for the second-order warp, by explicit outer products.
func (s *solver) hessian2(h *[144]float64) {
	m := s.m
	np := s.np
	var jv [12]float64
	var sxx, syy float64
	k := 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		for i := -m; i <= m; i++ {
			fx, fy := s.fx[k], s.fy[k]
			sxx += fx * fx
			syy += fy * fy
			s.jacobian(fx, fy, float64(i), eta, &jv)
			f := s.f[k]
			for a := 0; a < np; a++ {
				ja := jv[a]
				s.b0[a] += ja * f
				s.sj[a] += ja
				row := h[a*12 : a*12+np]
				for b := a; b < np; b++ {
					row[b] += ja * jv[b]
				}
			}
			k++
		}
	}
	s.sssig = math.Min(sxx, syy)
}

// shapeMonomials lists, for each of the six shape-function terms of one
// displacement component (in the order U, Ux, Uy, Uxx, Uxy, Uyy), its
// powers of ξ and η and its factor: 1, ξ, η, ξ²/2, ξη, η²/2.
var shapeMonomials = [6]struct {
	a, b int
	c    float64
}{{0, 0, 1}, {1, 0, 1}, {0, 1, 1}, {2, 0, 0.5}, {1, 1, 1}, {0, 2, 0.5}}

// paramTerm maps a parameter index to its component (0: u, 1: v) and its
// term in shapeMonomials.
var paramTerm = [12][2]int{
	U: {0, 0}, Ux: {0, 1}, Uy: {0, 2}, V: {1, 0}, Vx: {1, 1}, Vy: {1, 2},
	Uxx: {0, 3}, Uxy: {0, 4}, Uyy: {0, 5}, Vxx: {1, 3}, Vxy: {1, 4}, Vyy: {1, 5},
}

// acc4 adds c_k·η^b to d[k][b] for k + b ≤ 4, given η^b = p_b.
func acc4(d *[5][5]float64, c0, c1, c2, c3, c4, p1, p2, p3, p4 float64) {
	d[0][0] += c0
	d[0][1] += c0 * p1
	d[0][2] += c0 * p2
	d[0][3] += c0 * p3
	d[0][4] += c0 * p4
	d[1][0] += c1
	d[1][1] += c1 * p1
	d[1][2] += c1 * p2
	d[1][3] += c1 * p3
	d[2][0] += c2
	d[2][1] += c2 * p1
	d[2][2] += c2 * p2
	d[3][0] += c3
	d[3][1] += c3 * p1
	d[4][0] += c4
}

// accPow adds c·η^b to d[b] for b ≤ 4, given η^b = p_b: one line of acc4,
// small enough to be inlined (acc4 is not).
func accPow(d *[5]float64, c, p1, p2, p3, p4 float64) {
	d[0] += c
	d[1] += c * p1
	d[2] += c * p2
	d[3] += c * p3
	d[4] += c * p4
}

// acc4hi is acc4 for k = 2, 3, 4, small enough to be inlined.
func acc4hi(d *[5][5]float64, c2, c3, c4, p1, p2 float64) {
	d[2][0] += c2
	d[2][1] += c2 * p1
	d[2][2] += c2 * p2
	d[3][0] += c3
	d[3][1] += c3 * p1
	d[4][0] += c4
}

// acc2 adds c_k·η^b to d[k][b] for k + b ≤ 2, given η^b = p_b.
func acc2(d *[3][3]float64, c0, c1, c2, p1, p2 float64) {
	d[0][0] += c0
	d[0][1] += c0 * p1
	d[0][2] += c0 * p2
	d[1][0] += c1
	d[1][1] += c1 * p1
	d[2][0] += c2
}

// hessian2m is hessian2 by moments: every entry of H = Σ JᵀJ is a sum of
// w·ξ^a·η^b (a + b ≤ 4) with w one of fx², fx·fy, fy², and every entry of
// Σ J f̃ and Σ J one of fx·f̃, fy·f̃, fx, fy times ξ^a·η^b (a + b ≤ 2), so each
// subset row is summed over ξ once and weighted by powers of η afterwards.
// The row sums are running sums (see the loops), 7 multiplications and 27
// additions per pixel instead of the 90 multiply-adds of the explicit outer
// product.
func (s *solver) hessian2m(h *[144]float64) {
	m := s.m
	side := 2*m + 1
	var rw [3][5][5]float64  // rw[q][k][b] = Σ_rows (Σ_row C(i+k, k) w_q) η^b, k + b ≤ 4
	var rbw [4][3][3]float64 // the same for fx f̃, fy f̃, fx, fy, k + b ≤ 2
	k := 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		f := s.f[k : k+side]
		fx := s.fx[k : k+side]
		fy := s.fy[k : k+side]
		fx, fy = fx[:len(f)], fy[:len(f)]
		// r[q][a] = Σ_row w_q ξ^a and rb[q][a] likewise, by running sums
		// from the right end of the row as in hessian1: c_k += c_{k−1}
		// after c_0 += w, so that at the left end c_k = Σ C(i+k, k)·w_i
		// (i = 0 … 2m), which s.fromRising turns into moments in ξ = i − m.
		// One multiplication and five additions per weight and pixel
		// instead of five multiply-adds. The sums are scalars in three
		// loops of at most eleven, so that they stay in registers.
		var a0, a1, a2, a3, a4, b0, b1, b2, b3, b4 float64
		for i := len(f) - 1; i >= 0; i-- {
			gx, gy := fx[i], fy[i]
			a0 += gx * gx
			a1 += a0
			a2 += a1
			a3 += a2
			a4 += a3
			b0 += gx * gy
			b1 += b0
			b2 += b1
			b3 += b2
			b4 += b3
		}
		var c0, c1, c2, c3, c4, d0, d1, d2, e0, e1, e2 float64
		for i := len(f) - 1; i >= 0; i-- {
			gx, gy, fv := fx[i], fy[i], f[i]
			c0 += gy * gy
			c1 += c0
			c2 += c1
			c3 += c2
			c4 += c3
			d0 += gx * fv
			d1 += d0
			d2 += d1
			e0 += gy * fv
			e1 += e0
			e2 += e1
		}
		var g0, g1, g2, h0, h1, h2 float64
		for i := len(f) - 1; i >= 0; i-- {
			g0 += fx[i]
			g1 += g0
			g2 += g1
			h0 += fy[i]
			h1 += h0
			h2 += h1
		}
		// Weighted by powers of η over the rows; the sums stay in the
		// rising basis in ξ until the end (the change of basis is linear).
		p1 := eta
		p2 := p1 * eta
		p3 := p2 * eta
		p4 := p3 * eta
		acc4(&rw[0], a0, a1, a2, a3, a4, p1, p2, p3, p4)
		acc4(&rw[1], b0, b1, b2, b3, b4, p1, p2, p3, p4)
		acc4(&rw[2], c0, c1, c2, c3, c4, p1, p2, p3, p4)
		acc2(&rbw[0], d0, d1, d2, p1, p2)
		acc2(&rbw[1], e0, e1, e2, p1, p2)
		acc2(&rbw[2], g0, g1, g2, p1, p2)
		acc2(&rbw[3], h0, h1, h2, p1, p2)
		k += side
	}
	s.risingToMoments(h, &rw, &rbw)
}

// risingToMoments turns the row sums of hessian2m, rw[q][k][b] (k + b ≤ 4)
// and rbw[q][k][b] (k + b ≤ 2), still in the rising basis in ξ, into the
// moments of setHessian2, and fills h, Σ J f̃ and Σ J from them.
func (s *solver) risingToMoments(h *[144]float64, rw *[3][5][5]float64, rbw *[4][3][3]float64) {
	// Moments in ξ: mw[q][a][b] = Σ_k fromRising[a][k]·rw[q][k][b].
	var mw [3][5][5]float64 // mw[q][a][b] = Σ w_q ξ^a η^b, a + b ≤ 4
	var mb [4][3][3]float64 // mb[q][a][b] for fx f̃, fy f̃, fx, fy, a + b ≤ 2
	for q := range mw {
		for a := 0; a < 5; a++ {
			for b := 0; a+b < 5; b++ {
				for k := 0; k <= a; k++ {
					mw[q][a][b] += s.fromRising[a][k] * rw[q][k][b]
				}
			}
		}
	}
	for q := range mb {
		for a := 0; a < 3; a++ {
			for b := 0; a+b < 3; b++ {
				for k := 0; k <= a; k++ {
					mb[q][a][b] += s.fromRising[a][k] * rbw[q][k][b]
				}
			}
		}
	}
	s.setHessian2(h, &mw, &mb)
}

// setHessian2 fills the upper triangle of the second-order H, Σ J f̃ and
// Σ J from the moments mw[q][a][b] = Σ w_q ξ^a η^b (a + b ≤ 4) of w = fx²,
// fx fy, fy² and mb[q][a][b] (a + b ≤ 2) of fx f̃, fy f̃, fx, fy, and sets
// sssig.
func (s *solver) setHessian2(h *[144]float64, mw *[3][5][5]float64, mb *[4][3][3]float64) {
	for p := 0; p < 12; p++ {
		cp, tp := paramTerm[p][0], shapeMonomials[paramTerm[p][1]]
		for q := p; q < 12; q++ {
			cq, tq := paramTerm[q][0], shapeMonomials[paramTerm[q][1]]
			h[p*12+q] = tp.c * tq.c * mw[cp+cq][tp.a+tq.a][tp.b+tq.b]
		}
		s.b0[p] = tp.c * mb[cp][tp.a][tp.b]
		s.sj[p] = tp.c * mb[2+cp][tp.a][tp.b]
	}
	s.sssig = math.Min(mw[0][0][0], mw[2][0][0])
}

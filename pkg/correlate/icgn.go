package correlate

import "math"

// The inverse compositional Gauss–Newton (IC-GN) subset solver: Baker &
// Matthews 2004, "Lucas-Kanade 20 years on: a unifying framework", IJCV
// 56(3):221, with the ZNSSD criterion as in Pan, Li & Tong 2013, "Fast,
// robust and accurate digital image correlation calculation without
// redundant computations", Exp. Mech. 53:1277.
//
// With f̃ = f − f̄ over the reference subset, g̃ = g − ḡ over the warped
// deformed subset, Δf = ‖f̃‖, Δg = ‖g̃‖ and J the steepest-descent images
// ∇f·∂W/∂p, each iteration solves
//
//	Δp = −H⁻¹ Σ Jᵀ (f̃ − (Δf/Δg)·g̃),   H = Σ JᵀJ,
//
// and composes W(p) ← W(p) ∘ W(Δp)⁻¹. H, ΣJ and ΣJf̃ depend on the reference
// only and are computed once per point. Because Σ J g̃ = Σ J g − ḡ Σ J, one
// pass over the subset per iteration suffices.
//
// This file holds the iteration (solve) and the composition of warps; the
// solver's state is in solver.go, the reference subset and its Hessian in
// prepare.go and hessian.go, the passes over the deformed subset in
// tablepass*.go (coefficient table) and splinepass.go (spline), the
// Cholesky factorisation in linalg.go.

// result of one IC-GN attempt.
type attempt struct {
	p         [12]float64
	zncc      float64
	iter      int
	converged bool
	status    Status // OK, LeftImage or Diverged (ZNCC threshold applied by the caller)
}

// solve runs IC-GN from p0 on the prepared subset.
func (s *solver) solve(p0 [12]float64) attempt {
	p := p0
	if s.np == 6 {
		for k := Uxx; k <= Vyy; k++ {
			p[k] = 0
		}
	}
	n := float64(s.n)
	m := float64(s.m)
	var a attempt
	var dprev float64 // size of the previous step
	for it := 1; it <= s.maxIt; it++ {
		a.iter = it
		var sg, sgg, sfg float64
		var sjg [12]float64
		var ok bool
		switch {
		case s.tabled() && s.np == 6:
			ok = s.pass1fast(&p, &sg, &sgg, &sfg, &sjg)
		case s.tabled():
			ok = s.pass2fast(&p, &sg, &sgg, &sfg, &sjg)
		case s.np == 6:
			ok = s.pass1(&p, &sg, &sgg, &sfg, &sjg)
		default:
			ok = s.pass2(&p, &sg, &sgg, &sfg, &sjg)
		}
		if !ok {
			// The warped subset reaches past the usable area of the
			// deformed image: the point is outside, not a failed solve.
			a.p, a.status = p, LeftImage
			return a
		}
		gm := sg / n
		dg2 := sgg - n*gm*gm
		if !(dg2 > 0) {
			a.p, a.status = p, Diverged
			return a
		}
		dg := math.Sqrt(dg2)
		a.zncc = sfg / (s.df * dg)
		scale := s.df / dg
		var dp [12]float64
		for k := 0; k < s.np; k++ {
			dp[k] = -(s.b0[k] - scale*(sjg[k]-gm*s.sj[k]))
		}
		cholSolve(&s.chol, s.np, &dp)
		d := paramNorm(&dp, s.np, m)
		if !(d <= 2*m) { // NaN, or a step larger than the subset
			a.p, a.status = p, Diverged
			return a
		}
		var ok2 bool
		if s.np == 6 {
			ok2 = compose1(&p, &dp)
		} else {
			ok2 = compose2(&p, &dp)
		}
		if !ok2 {
			a.p, a.status = p, Diverged
			return a
		}
		if d < s.tol || it > 1 && tailBelow(dprev, d, s.tol*s.tailFrac) {
			a.p, a.converged, a.status = p, true, OK
			return a
		}
		dprev = d
		// (Rules tried and dropped: tailBelow with tol/8 for the
		// second-order warp, which left points up to 1.4e-4 px from the
		// limit on a 512² pair like BenchmarkRun1024's (tol/16: 8.5e-5),
		// and without a factor up to 3e-4 px in
		// TestStoppingRuleWithinTol; the largest displacement change on
		// the subset boundary as the step size, stricter than paramNorm,
		// which cost iterations: 2.70 instead of 2.54 per point on
		// BenchmarkRun1024; an exit after five iterations without
		// progress, which turned a few slowly converging points into
		// Diverged.)
	}
	a.p, a.status = p, Diverged
	return a
}

// tailBelow reports whether the steps shrink so fast that what is left of
// the iteration is far below tol: with the contraction ρ = d/dprev of the
// last two steps, a geometric tail would add ρ/(1−ρ)·d, and the rule asks
// for that to be below lim, tol/8 for the first-order warp and tol/16 for
// the second-order one (solver.tailFrac). It saves the last step of most
// points that the plain rule, d < tol, takes three steps for: their second
// step is a few 1e-4 px and the steps contract by 0.01–0.1 each. On a 512²
// pair like BenchmarkRun1024's the true tail (the later steps of the plain
// rule) of the points it stopped was up to 12× (first order) and 20×
// (second) the geometric estimate, and at most 5e-5 px and 8.5e-5 px;
// TestStoppingRuleWithinTol bounds the distance to the limit by tol.
func tailBelow(dprev, d, lim float64) bool {
	r := d / dprev
	return r < 0.5 && d*r < (1-r)*lim
}

// paramNorm is the step size in px: the Euclidean norm of the parameter
// update with gradients weighted by the half-width m and second
// derivatives by m²/2 (m² for the cross terms).
func paramNorm(dp *[12]float64, np int, m float64) float64 {
	norm := dp[U]*dp[U] + dp[V]*dp[V] + m*m*(dp[Ux]*dp[Ux]+dp[Uy]*dp[Uy]+dp[Vx]*dp[Vx]+dp[Vy]*dp[Vy])
	if np == 12 {
		h := m * m / 2
		norm += h*h*(dp[Uxx]*dp[Uxx]+dp[Uyy]*dp[Uyy]+dp[Vxx]*dp[Vxx]+dp[Vyy]*dp[Vyy]) +
			m*m*m*m*(dp[Uxy]*dp[Uxy]+dp[Vxy]*dp[Vxy])
	}
	return math.Sqrt(norm)
}

// compose1 sets p ← p ∘ dp⁻¹ for first-order (affine) warps in homogeneous
// form [[1+ux, uy, u], [vx, 1+vy, v], [0, 0, 1]].
func compose1(p, dp *[12]float64) bool {
	a11, a12, a21, a22 := 1+dp[Ux], dp[Uy], dp[Vx], 1+dp[Vy]
	det := a11*a22 - a12*a21
	if !(math.Abs(det) > 1e-12) {
		return false
	}
	// Inverse of the increment.
	i11, i12, i21, i22 := a22/det, -a12/det, -a21/det, a11/det
	it0 := -(i11*dp[U] + i12*dp[V])
	it1 := -(i21*dp[U] + i22*dp[V])
	b11, b12, b21, b22 := 1+p[Ux], p[Uy], p[Vx], 1+p[Vy]
	p[U] = b11*it0 + b12*it1 + p[U]
	p[V] = b21*it0 + b22*it1 + p[V]
	p[Ux] = b11*i11 + b12*i21 - 1
	p[Uy] = b11*i12 + b12*i22
	p[Vx] = b21*i11 + b22*i21
	p[Vy] = b21*i12 + b22*i22 - 1
	return true
}

// warpMatrix builds the 6×6 matrix that maps the monomials
// [ξ², ξη, η², ξ, η, 1] of a point to those of its image under the
// second-order warp p, truncated at degree two (Gao, Cheng, Su & Xu 2015,
// "High-efficiency and high-accuracy digital image correlation for
// three-dimensional measurement", Opt. Lasers Eng. 65:73, from memory; the
// tests check composition against direct evaluation).
func warpMatrix(p *[12]float64, w *[36]float64) {
	a0, a1, a2 := p[U], 1+p[Ux], p[Uy]
	a3, a4, a5 := p[Uxx]/2, p[Uxy], p[Uyy]/2
	b0, b1, b2 := p[V], p[Vx], 1+p[Vy]
	b3, b4, b5 := p[Vxx]/2, p[Vxy], p[Vyy]/2
	*w = [36]float64{
		// ξ'²
		a1*a1 + 2*a0*a3, 2*a1*a2 + 2*a0*a4, a2*a2 + 2*a0*a5, 2 * a0 * a1, 2 * a0 * a2, a0 * a0,
		// ξ'η'
		a1*b1 + a0*b3 + a3*b0, a1*b2 + a2*b1 + a0*b4 + a4*b0, a2*b2 + a0*b5 + a5*b0, a0*b1 + a1*b0, a0*b2 + a2*b0, a0 * b0,
		// η'²
		b1*b1 + 2*b0*b3, 2*b1*b2 + 2*b0*b4, b2*b2 + 2*b0*b5, 2 * b0 * b1, 2 * b0 * b2, b0 * b0,
		// ξ'
		a3, a4, a5, a1, a2, a0,
		// η'
		b3, b4, b5, b1, b2, b0,
		// 1
		0, 0, 0, 0, 0, 1,
	}
}

// compose2 sets p ← p ∘ dp⁻¹ for second-order warps through warpMatrix.
func compose2(p, dp *[12]float64) bool {
	var wp, wd, inv [36]float64
	warpMatrix(p, &wp)
	warpMatrix(dp, &wd)
	if !invert6(&wd, &inv) {
		return false
	}
	var r [2][6]float64 // rows ξ' and η' of wp·inv
	for i := 0; i < 2; i++ {
		for j := 0; j < 6; j++ {
			var s float64
			for k := 0; k < 6; k++ {
				s += wp[(3+i)*6+k] * inv[k*6+j]
			}
			r[i][j] = s
		}
	}
	p[Uxx], p[Uxy], p[Uyy], p[Ux], p[Uy], p[U] = 2*r[0][0], r[0][1], 2*r[0][2], r[0][3]-1, r[0][4], r[0][5]
	p[Vxx], p[Vxy], p[Vyy], p[Vx], p[Vy], p[V] = 2*r[1][0], r[1][1], 2*r[1][2], r[1][3], r[1][4]-1, r[1][5]
	return true
}

// invert6 inverts a 6×6 matrix by Gauss–Jordan elimination with partial
// pivoting, reporting false if it is singular.
func invert6(a, inv *[36]float64) bool {
	m := *a
	*inv = [36]float64{}
	for i := 0; i < 6; i++ {
		inv[i*6+i] = 1
	}
	for c := 0; c < 6; c++ {
		piv, best := c, math.Abs(m[c*6+c])
		for r := c + 1; r < 6; r++ {
			if v := math.Abs(m[r*6+c]); v > best {
				piv, best = r, v
			}
		}
		if !(best > 1e-14) {
			return false
		}
		if piv != c {
			for k := 0; k < 6; k++ {
				m[c*6+k], m[piv*6+k] = m[piv*6+k], m[c*6+k]
				inv[c*6+k], inv[piv*6+k] = inv[piv*6+k], inv[c*6+k]
			}
		}
		d := 1 / m[c*6+c]
		for k := 0; k < 6; k++ {
			m[c*6+k] *= d
			inv[c*6+k] *= d
		}
		for r := 0; r < 6; r++ {
			if r == c {
				continue
			}
			f := m[r*6+c]
			if f == 0 {
				continue
			}
			for k := 0; k < 6; k++ {
				m[r*6+k] -= f * m[c*6+k]
				inv[r*6+k] -= f * inv[c*6+k]
			}
		}
	}
	return true
}

package correlate

// pass1 interpolates the deformed subset under the first-order warp p and
// accumulates Σg, Σg², Σf̃g and ΣJg (g offset by f̄ to limit cancellation).
// It reports false if the warped subset leaves the deformed image.
func (s *solver) pass1(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	m := s.m
	fm := float64(m)
	a11, a12, a21, a22 := 1+p[Ux], p[Uy], p[Vx], 1+p[Vy]
	cx, cy := s.xc+p[U], s.yc+p[V]
	// The warp is affine: the corners bound the warped subset.
	for _, c := range [4][2]float64{{-fm, -fm}, {fm, -fm}, {-fm, fm}, {fm, fm}} {
		x := cx + a11*c[0] + a12*c[1]
		y := cy + a21*c[0] + a22*c[1]
		if !(x >= s.lo && x <= s.defW && y >= s.lo && y <= s.defH) {
			return false
		}
	}
	side := 2*m + 1
	g := s.gbuf[:side]
	var tg, tgg, tfg, tx0, tx1, tx2, ty0, ty1, ty2 float64
	fmean := s.fmean
	k := 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		s.def.Line(cx-a11*fm+a12*eta, cy-a21*fm+a22*eta, a11, a21, g)
		f := s.f[k : k+side]
		fx := s.fx[k : k+side]
		fy := s.fy[k : k+side]
		var rx0, rx1, ry0, ry1 float64
		xi := -fm
		for i := range g {
			v := g[i] - fmean
			tg += v
			tgg += v * v
			tfg += f[i] * v
			a, b := fx[i]*v, fy[i]*v
			rx0 += a
			rx1 += a * xi
			ry0 += b
			ry1 += b * xi
			xi++
		}
		tx0 += rx0
		tx1 += rx1
		tx2 += rx0 * eta
		ty0 += ry0
		ty1 += ry1
		ty2 += ry0 * eta
		k += side
	}
	*sg, *sgg, *sfg = tg, tgg, tfg
	sjg[U], sjg[Ux], sjg[Uy] = tx0, tx1, tx2
	sjg[V], sjg[Vx], sjg[Vy] = ty0, ty1, ty2
	return true
}

// pass2 is pass1 for the second-order warp.
func (s *solver) pass2(p *[12]float64, sg, sgg, sfg *float64, sjg *[12]float64) bool {
	m := s.m
	fm := float64(m)
	side := 2*m + 1
	g := s.gbuf[:side]
	xs, ys := s.xs[:side], s.ys[:side]
	var tg, tgg, tfg float64
	var acc [12]float64
	fmean := s.fmean
	k := 0
	for j := -m; j <= m; j++ {
		eta := float64(j)
		xi := -fm
		for i := range xs {
			du, dv := Displacement(p, xi, eta)
			x, y := s.xc+xi+du, s.yc+eta+dv
			if !(x >= s.lo && x <= s.defW && y >= s.lo && y <= s.defH) {
				return false
			}
			xs[i], ys[i] = x, y
			xi++
		}
		s.def.Points(xs, ys, g)
		f := s.f[k : k+side]
		fx := s.fx[k : k+side]
		fy := s.fy[k : k+side]
		var rx0, rx1, rx2, ry0, ry1, ry2 float64
		xi = -fm
		for i := range g {
			v := g[i] - fmean
			tg += v
			tgg += v * v
			tfg += f[i] * v
			a, b := fx[i]*v, fy[i]*v
			rx0 += a
			rx1 += a * xi
			rx2 += a * xi * xi
			ry0 += b
			ry1 += b * xi
			ry2 += b * xi * xi
			xi++
		}
		acc[U] += rx0
		acc[Ux] += rx1
		acc[Uy] += rx0 * eta
		acc[Uxx] += rx2 / 2
		acc[Uxy] += rx1 * eta
		acc[Uyy] += rx0 * eta * eta / 2
		acc[V] += ry0
		acc[Vx] += ry1
		acc[Vy] += ry0 * eta
		acc[Vxx] += ry2 / 2
		acc[Vxy] += ry1 * eta
		acc[Vyy] += ry0 * eta * eta / 2
		k += side
	}
	*sg, *sgg, *sfg = tg, tgg, tfg
	*sjg = acc
	return true
}

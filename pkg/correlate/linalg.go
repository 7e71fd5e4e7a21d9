package correlate

import "math"

// cholesky factors the symmetric positive definite n×n matrix whose upper
// triangle is in a (row stride 12) as L·Lᵀ, L stored lower-triangular in l.
// It reports false if a is not numerically positive definite.
func cholesky(a *[144]float64, n int, l *[144]float64) bool {
	*l = [144]float64{}
	for j := 0; j < n; j++ {
		d := a[j*12+j]
		for k := 0; k < j; k++ {
			d -= l[j*12+k] * l[j*12+k]
		}
		if !(d > 1e-12*a[j*12+j]) {
			return false
		}
		d = math.Sqrt(d)
		l[j*12+j] = d
		for i := j + 1; i < n; i++ {
			s := a[j*12+i] // upper triangle: a[j][i] = a[i][j]
			for k := 0; k < j; k++ {
				s -= l[i*12+k] * l[j*12+k]
			}
			l[i*12+j] = s / d
		}
	}
	return true
}

// cholSolve solves L·Lᵀ x = b in place.
func cholSolve(l *[144]float64, n int, b *[12]float64) {
	for i := 0; i < n; i++ {
		s := b[i]
		for k := 0; k < i; k++ {
			s -= l[i*12+k] * b[k]
		}
		b[i] = s / l[i*12+i]
	}
	for i := n - 1; i >= 0; i-- {
		s := b[i]
		for k := i + 1; k < n; k++ {
			s -= l[k*12+i] * b[k]
		}
		b[i] = s / l[i*12+i]
	}
}

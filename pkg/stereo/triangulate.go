// Package stereo measures 3D shape, 3D displacement and surface strain
// from a calibrated pair of cameras: subsets of the left image are found
// in the right image (seeded along the epipolar line, refined by IC-GN with
// a second-order shape function), tracked over time in each camera, and
// every matched pair of image points is triangulated (the linear method,
// then the optimal correction of Hartley & Sturm 1997, "Triangulation",
// Comput. Vis. Image Underst. 68(2):146) after the lens distortion is
// removed. Surface strain is computed in the local tangent plane of the
// measured surface (Luo, Chao, Sutton & Peters 1993, "Accurate measurement
// of three-dimensional deformations in deformable and rigid bodies using
// computer vision", Exp. Mech. 33:123; Sutton, Orteu & Schreier 2009,
// "Image Correlation for Shape, Motion and Deformation Measurements").
//
// 3D positions are in mm in the left camera's frame (x right, y down, z
// along the optical axis) unless a Frame says otherwise.
package stereo

import (
	"errors"
	"fmt"
	"math"
	"math/cmplx"

	"gonum.org/v1/gonum/mat"

	"github.com/mottledic/mottle/pkg/calib"
)

// Errors of triangulation, for callers that must tell cases apart.
var (
	// ErrBehind: the triangulated point is not in front of both cameras.
	ErrBehind = errors.New("the point is behind a camera")
	// ErrRaysApart: the two rays pass further apart than allowed — the
	// match is wrong or the rig file does not fit the cameras.
	ErrRaysApart = errors.New("the two rays nearly do not meet")
	// ErrParallel: the rays are parallel (a point at infinity).
	ErrParallel = errors.New("the two rays are parallel")
)

// Triangulator triangulates image points of a rig.
type Triangulator struct {
	rig calib.Rig
	// kl, kr: the pinhole matrices without distortion.
	kl, kr [3][3]float64
	// f: the fundamental matrix of undistorted pixels, xrᵀ F xl = 0.
	f [3][3]float64
	// pl, pr: projection matrices of undistorted pixels.
	pl, pr [3][4]float64
}

// NewTriangulator returns the triangulator of a rig. It returns an error if
// the rig is not valid.
func NewTriangulator(rig *calib.Rig) (*Triangulator, error) {
	if rig == nil {
		return nil, errors.New("stereo: no rig")
	}
	if err := rig.Validate(); err != nil {
		return nil, fmt.Errorf("stereo: %w", err)
	}
	t := &Triangulator{rig: *rig}
	t.kl = kmat(rig.Left)
	t.kr = kmat(rig.Right)
	// E = [T]× R (Hartley & Zisserman 2003, eq. 9.8); F = Kr⁻ᵀ E Kl⁻¹.
	T := rig.T
	tx := [3][3]float64{{0, -T[2], T[1]}, {T[2], 0, -T[0]}, {-T[1], T[0], 0}}
	E := mul(tx, rig.R)
	t.f = mul(transpose(inv(t.kr)), mul(E, inv(t.kl)))
	for i := range 3 {
		for j := range 3 {
			t.pl[i][j] = t.kl[i][j]
		}
	}
	KR := mul(t.kr, rig.R)
	for i := range 3 {
		for j := range 3 {
			t.pr[i][j] = KR[i][j]
		}
		t.pr[i][3] = t.kr[i][0]*T[0] + t.kr[i][1]*T[1] + t.kr[i][2]*T[2]
	}
	return t, nil
}

// Rig returns the rig.
func (t *Triangulator) Rig() *calib.Rig { return &t.rig }

// Projections returns the 3×4 projection matrices of undistorted pixels of
// the left and right camera (left frame as the world frame).
func (t *Triangulator) Projections() (pl, pr [3][4]float64) { return t.pl, t.pr }

// Fundamental returns the fundamental matrix of undistorted pixels:
// x_rᵀ F x_l = 0 for a pair of images of one point.
func (t *Triangulator) Fundamental() [3][3]float64 { return t.f }

func kmat(c calib.Camera) [3][3]float64 {
	return [3][3]float64{{c.Fx, 0, c.Cx}, {0, c.Fy, c.Cy}, {0, 0, 1}}
}

// Undistort returns the undistorted pixels of a left and a right image
// position (distorted, as measured).
func (t *Triangulator) Undistort(xl, yl, xr, yr float64) (ul, ur [2]float64, err error) {
	a, b, err := t.rig.Left.UndistortPixel(xl, yl)
	if err != nil {
		return ul, ur, fmt.Errorf("left (%g, %g): %w", xl, yl, err)
	}
	c, d, err := t.rig.Right.UndistortPixel(xr, yr)
	if err != nil {
		return ul, ur, fmt.Errorf("right (%g, %g): %w", xr, yr, err)
	}
	return [2]float64{a, b}, [2]float64{c, d}, nil
}

// Linear triangulates a pair of undistorted pixels by the homogeneous
// linear method (Hartley & Zisserman 2003, §12.2): the null vector of the
// 4×4 system, found by SVD. It returns ErrParallel for a point at infinity.
func (t *Triangulator) Linear(ul, ur [2]float64) ([3]float64, error) {
	return linear(&t.pl, &t.pr, ul, ur)
}

func linear(pl, pr *[3][4]float64, ul, ur [2]float64) ([3]float64, error) {
	a := mat.NewDense(4, 4, nil)
	rows := [4][4]float64{}
	for j := range 4 {
		rows[0][j] = ul[0]*pl[2][j] - pl[0][j]
		rows[1][j] = ul[1]*pl[2][j] - pl[1][j]
		rows[2][j] = ur[0]*pr[2][j] - pr[0][j]
		rows[3][j] = ur[1]*pr[2][j] - pr[1][j]
	}
	for i := range 4 {
		for j := range 4 {
			a.Set(i, j, rows[i][j])
		}
	}
	var svd mat.SVD
	if !svd.Factorize(a, mat.SVDFull) {
		return [3]float64{}, errors.New("stereo: triangulation SVD failed")
	}
	var v mat.Dense
	svd.VTo(&v)
	w := v.At(3, 3)
	if !(math.Abs(w) > 1e-12*math.Sqrt(v.At(0, 3)*v.At(0, 3)+v.At(1, 3)*v.At(1, 3)+v.At(2, 3)*v.At(2, 3))) {
		return [3]float64{}, ErrParallel
	}
	return [3]float64{v.At(0, 3) / w, v.At(1, 3) / w, v.At(2, 3) / w}, nil
}

// Optimal returns the pair of undistorted pixels nearest to (ul, ur) that
// satisfies the epipolar constraint exactly — the optimal correction of
// Hartley & Sturm 1997 (Hartley & Zisserman 2003, Algorithm 12.1: the root
// of a degree-6 polynomial) — and the corrected pair's total squared
// distance to the measured one, px².
func (t *Triangulator) Optimal(ul, ur [2]float64) (cl, cr [2]float64, d2 float64) {
	// Move both points to the origin.
	T1i := [3][3]float64{{1, 0, ul[0]}, {0, 1, ul[1]}, {0, 0, 1}}
	T2i := [3][3]float64{{1, 0, ur[0]}, {0, 1, ur[1]}, {0, 0, 1}}
	F := mul(transpose(T2i), mul(t.f, T1i))
	// Epipoles: F e = 0 (left), Fᵀ e' = 0 (right), normalised so that
	// e1² + e2² = 1.
	e := nullVec(F)
	ep := nullVec(transpose(F))
	ne := math.Hypot(e[0], e[1])
	nep := math.Hypot(ep[0], ep[1])
	for i := range 3 {
		e[i] /= ne
		ep[i] /= nep
	}
	R := [3][3]float64{{e[0], e[1], 0}, {-e[1], e[0], 0}, {0, 0, 1}}
	Rp := [3][3]float64{{ep[0], ep[1], 0}, {-ep[1], ep[0], 0}, {0, 0, 1}}
	F = mul(Rp, mul(F, transpose(R)))
	f, fp := e[2], ep[2]
	a, b, c, d := F[1][1], F[1][2], F[2][1], F[2][2]
	// g(t) = t((at+b)² + f'²(ct+d)²)² − (ad − bc)(1 + f²t²)²(at+b)(ct+d).
	atb := []float64{b, a} // coefficients, lowest degree first
	ctd := []float64{d, c}
	q := padd(pmul(atb, atb), pscale(pmul(ctd, ctd), fp*fp))
	g := pmul([]float64{0, 1}, pmul(q, q))
	ft := []float64{1, 0, f * f}
	g = padd(g, pscale(pmul(pmul(ft, ft), pmul(atb, ctd)), -(a*d-b*c)))
	cost := func(t float64) float64 {
		u, v := a*t+b, c*t+d
		return t*t/(1+f*f*t*t) + v*v/(u*u+fp*fp*v*v)
	}
	best := 1/(f*f) + c*c/(a*a+fp*fp*c*c) // t → ∞
	bt, inf := 0.0, true
	if f == 0 {
		best = math.Inf(1)
	}
	for _, r := range roots(g) {
		if math.Abs(imag(r)) > 1e-9*math.Max(1, math.Abs(real(r))) {
			continue
		}
		if s := cost(real(r)); s < best {
			best, bt, inf = s, real(r), false
		}
	}
	var l, lp [3]float64
	if inf {
		l = [3]float64{f, 0, -1}
		lp = [3]float64{-fp * c, a, c}
	} else {
		l = [3]float64{bt * f, 1, -bt}
		lp = [3]float64{-fp * (c*bt + d), a*bt + b, c*bt + d}
	}
	foot := func(l [3]float64) [3]float64 { // the point of l nearest the origin
		return [3]float64{-l[0] * l[2], -l[1] * l[2], l[0]*l[0] + l[1]*l[1]}
	}
	x := mulv(T1i, mulv(transpose(R), foot(l)))
	xp := mulv(T2i, mulv(transpose(Rp), foot(lp)))
	cl = [2]float64{x[0] / x[2], x[1] / x[2]}
	cr = [2]float64{xp[0] / xp[2], xp[1] / xp[2]}
	d2 = sq(cl[0]-ul[0]) + sq(cl[1]-ul[1]) + sq(cr[0]-ur[0]) + sq(cr[1]-ur[1])
	return cl, cr, d2
}

// Point3 is one triangulated point.
type Point3 struct {
	// X is the position in the left camera's frame, mm.
	X [3]float64
	// Gap is the length of the optimal correction: the root of the summed
	// squared image distances between the measured and the corrected pair,
	// px. It is 0 for a perfect match on a perfect rig.
	Gap float64
}

// Triangulate triangulates a measured pair of (distorted) image positions:
// distortion removed, the optimal correction of Hartley & Sturm applied,
// then the linear method on the corrected pair (where it is exact). It
// returns ErrRaysApart if the correction is longer than maxGap px (0 means
// no limit), ErrBehind if the point is not in front of both cameras, and
// ErrParallel for a point at infinity.
func (t *Triangulator) Triangulate(xl, yl, xr, yr, maxGap float64) (Point3, error) {
	ul, ur, err := t.Undistort(xl, yl, xr, yr)
	if err != nil {
		return Point3{}, err
	}
	cl, cr, d2 := t.Optimal(ul, ur)
	p := Point3{Gap: math.Sqrt(d2)}
	if maxGap > 0 && !(p.Gap <= maxGap) {
		return p, fmt.Errorf("%w: the image points are %.3g px from a consistent pair (limit %g px)", ErrRaysApart, p.Gap, maxGap)
	}
	X, err := linear(&t.pl, &t.pr, cl, cr)
	if err != nil {
		return p, err
	}
	p.X = X
	zr := t.rig.R[2][0]*X[0] + t.rig.R[2][1]*X[1] + t.rig.R[2][2]*X[2] + t.rig.T[2]
	if !(X[2] > 0 && zr > 0) {
		return p, fmt.Errorf("%w: depth %.4g mm (left), %.4g mm (right)", ErrBehind, X[2], zr)
	}
	return p, nil
}

// Cov returns the covariance (mm²) of the triangulated position of the
// measured pair from independent errors of std sl (left, px, each
// coordinate) and sr (right): J diag(σ²) Jᵀ with J by central differences.
func (t *Triangulator) Cov(xl, yl, xr, yr, sl, sr float64) ([3][3]float64, error) {
	in := [4]float64{xl, yl, xr, yr}
	sd := [4]float64{sl, sl, sr, sr}
	var J [3][4]float64
	for k := range 4 {
		if sd[k] == 0 {
			continue
		}
		h := 1e-3
		a, b := in, in
		a[k] += h
		b[k] -= h
		pa, err := t.Triangulate(a[0], a[1], a[2], a[3], 0)
		if err != nil {
			return [3][3]float64{}, err
		}
		pb, err := t.Triangulate(b[0], b[1], b[2], b[3], 0)
		if err != nil {
			return [3][3]float64{}, err
		}
		for i := range 3 {
			J[i][k] = (pa.X[i] - pb.X[i]) / (2 * h)
		}
	}
	var c [3][3]float64
	for i := range 3 {
		for j := range 3 {
			for k := range 4 {
				c[i][j] += J[i][k] * sd[k] * sd[k] * J[j][k]
			}
		}
	}
	return c, nil
}

// Project returns the distorted pixels at which the left-frame point X is
// seen by the left and the right camera; ok is false if it is behind
// either.
func (t *Triangulator) Project(X [3]float64) (l, r [2]float64, ok bool) {
	x, y, ok1 := t.rig.Left.Project(X)
	var q [3]float64
	for i := range 3 {
		q[i] = t.rig.R[i][0]*X[0] + t.rig.R[i][1]*X[1] + t.rig.R[i][2]*X[2] + t.rig.T[i]
	}
	u, v, ok2 := t.rig.Right.Project(q)
	return [2]float64{x, y}, [2]float64{u, v}, ok1 && ok2
}

func sq(x float64) float64 { return x * x }

func mul(a, b [3][3]float64) (c [3][3]float64) {
	for i := range 3 {
		for j := range 3 {
			for k := range 3 {
				c[i][j] += a[i][k] * b[k][j]
			}
		}
	}
	return c
}

func mulv(a [3][3]float64, v [3]float64) [3]float64 {
	return [3]float64{
		a[0][0]*v[0] + a[0][1]*v[1] + a[0][2]*v[2],
		a[1][0]*v[0] + a[1][1]*v[1] + a[1][2]*v[2],
		a[2][0]*v[0] + a[2][1]*v[1] + a[2][2]*v[2],
	}
}

func transpose(a [3][3]float64) [3][3]float64 {
	return [3][3]float64{{a[0][0], a[1][0], a[2][0]}, {a[0][1], a[1][1], a[2][1]}, {a[0][2], a[1][2], a[2][2]}}
}

func inv(a [3][3]float64) [3][3]float64 {
	d := a[0][0]*(a[1][1]*a[2][2]-a[1][2]*a[2][1]) - a[0][1]*(a[1][0]*a[2][2]-a[1][2]*a[2][0]) + a[0][2]*(a[1][0]*a[2][1]-a[1][1]*a[2][0])
	var b [3][3]float64
	for i := range 3 {
		for j := range 3 {
			i1, i2 := (j+1)%3, (j+2)%3
			j1, j2 := (i+1)%3, (i+2)%3
			b[i][j] = (a[i1][j1]*a[i2][j2] - a[i1][j2]*a[i2][j1]) / d
		}
	}
	return b
}

// nullVec returns the unit right null vector of a rank-2 matrix: the
// cross product of its two best-conditioned rows.
func nullVec(a [3][3]float64) [3]float64 {
	var best [3]float64
	var bn float64
	for _, p := range [3][2]int{{0, 1}, {0, 2}, {1, 2}} {
		c := cross(a[p[0]], a[p[1]])
		if n := math.Sqrt(c[0]*c[0] + c[1]*c[1] + c[2]*c[2]); n > bn {
			best, bn = c, n
		}
	}
	return [3]float64{best[0] / bn, best[1] / bn, best[2] / bn}
}

func cross(a, b [3]float64) [3]float64 {
	return [3]float64{a[1]*b[2] - a[2]*b[1], a[2]*b[0] - a[0]*b[2], a[0]*b[1] - a[1]*b[0]}
}

// Polynomials: coefficients from the lowest degree up.
func pmul(a, b []float64) []float64 {
	c := make([]float64, len(a)+len(b)-1)
	for i, x := range a {
		for j, y := range b {
			c[i+j] += x * y
		}
	}
	return c
}

func padd(a, b []float64) []float64 {
	c := make([]float64, max(len(a), len(b)))
	for i, x := range a {
		c[i] += x
	}
	for i, y := range b {
		c[i] += y
	}
	return c
}

func pscale(a []float64, s float64) []float64 {
	c := make([]float64, len(a))
	for i, x := range a {
		c[i] = x * s
	}
	return c
}

// roots returns the complex roots of the polynomial c (lowest degree
// first) as the eigenvalues of its companion matrix, each polished by a
// few Newton steps.
func roots(c []float64) []complex128 {
	n := len(c) - 1
	scale := 0.0
	for _, v := range c {
		scale = math.Max(scale, math.Abs(v))
	}
	for n > 0 && math.Abs(c[n]) <= 1e-14*scale {
		n--
	}
	if n < 1 {
		return nil
	}
	m := mat.NewDense(n, n, nil)
	for i := 1; i < n; i++ {
		m.Set(i, i-1, 1)
	}
	for i := range n {
		m.Set(i, n-1, -c[i]/c[n])
	}
	var eig mat.Eigen
	if !eig.Factorize(m, mat.EigenNone) {
		return nil
	}
	rs := eig.Values(nil)
	for k, r := range rs {
		for range 3 {
			var p, dp complex128
			for i := n; i >= 0; i-- {
				dp = dp*r + p
				p = p*r + complex(c[i], 0)
			}
			if dp == 0 || cmplx.IsNaN(p/dp) {
				break
			}
			r -= p / dp
		}
		rs[k] = r
	}
	return rs
}

package calib

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// normaliser returns the similarity that moves points to zero mean and mean
// distance √2 from the origin (Hartley's normalisation for the DLT).
func normaliser(p [][2]float64) [3][3]float64 {
	var mx, my float64
	for _, q := range p {
		mx += q[0]
		my += q[1]
	}
	n := float64(len(p))
	mx, my = mx/n, my/n
	var d float64
	for _, q := range p {
		d += math.Hypot(q[0]-mx, q[1]-my)
	}
	d /= n
	s := math.Sqrt2 / math.Max(d, 1e-12)
	return [3][3]float64{{s, 0, -s * mx}, {0, s, -s * my}, {0, 0, 1}}
}

func apply3(T [3][3]float64, x, y float64) (float64, float64) {
	w := T[2][0]*x + T[2][1]*y + T[2][2]
	return (T[0][0]*x + T[0][1]*y + T[0][2]) / w, (T[1][0]*x + T[1][1]*y + T[1][2]) / w
}

func inv3(a [3][3]float64) ([3][3]float64, bool) {
	d := det3(a)
	if !(math.Abs(d) > 0) {
		return a, false
	}
	var b [3][3]float64
	for i := range 3 {
		for j := range 3 {
			i1, i2 := (j+1)%3, (j+2)%3
			j1, j2 := (i+1)%3, (i+2)%3
			b[i][j] = (a[i1][j1]*a[i2][j2] - a[i1][j2]*a[i2][j1]) / d
		}
	}
	return b, true
}

func det3(a [3][3]float64) float64 {
	return a[0][0]*(a[1][1]*a[2][2]-a[1][2]*a[2][1]) -
		a[0][1]*(a[1][0]*a[2][2]-a[1][2]*a[2][0]) +
		a[0][2]*(a[1][0]*a[2][1]-a[1][1]*a[2][0])
}

func mul3(a, b [3][3]float64) (c [3][3]float64) {
	for i := range 3 {
		for j := range 3 {
			for k := range 3 {
				c[i][j] += a[i][k] * b[k][j]
			}
		}
	}
	return c
}

// homography returns H with dst ~ H·src, by the normalised direct linear
// transform (Hartley & Zisserman 2003, "Multiple View Geometry", §4.4).
func homography(src, dst [][2]float64) ([3][3]float64, error) {
	if len(src) < 4 || len(src) != len(dst) {
		return [3][3]float64{}, fmt.Errorf("homography needs at least 4 point pairs, have %d", len(src))
	}
	ts, td := normaliser(src), normaliser(dst)
	a := mat.NewDense(2*len(src), 9, nil)
	for k := range src {
		x, y := apply3(ts, src[k][0], src[k][1])
		u, v := apply3(td, dst[k][0], dst[k][1])
		a.SetRow(2*k, []float64{-x, -y, -1, 0, 0, 0, u * x, u * y, u})
		a.SetRow(2*k+1, []float64{0, 0, 0, -x, -y, -1, v * x, v * y, v})
	}
	var svd mat.SVD
	if !svd.Factorize(a, mat.SVDThinV) {
		return [3][3]float64{}, errors.New("homography: SVD failed")
	}
	var V mat.Dense
	svd.VTo(&V)
	sv := svd.Values(nil)
	if sv[7] < 1e-9*sv[0] {
		return [3][3]float64{}, errors.New("homography: the points are collinear")
	}
	var hn [3][3]float64
	for i := range 9 {
		hn[i/3][i%3] = V.At(i, 8)
	}
	tdi, _ := inv3(td)
	H := mul3(tdi, mul3(hn, ts))
	if math.Abs(H[2][2]) > 1e-300 {
		s := 1 / H[2][2]
		for i := range 3 {
			for j := range 3 {
				H[i][j] *= s
			}
		}
	}
	return H, nil
}

// zhangIntrinsics returns the camera matrix from plane homographies by the
// closed form of Zhang 2000, "A flexible new technique for camera
// calibration", IEEE TPAMI 22(11):1330, §3.1 and Appendix B, with zero skew
// imposed (an extra row [0 1 0 0 0 0]·b = 0), so two views already suffice.
func zhangIntrinsics(hs [][3][3]float64) (fx, fy, cx, cy float64, err error) {
	// v_ij = [h1i h1j, h1i h2j + h2i h1j, h2i h2j, h3i h1j + h1i h3j, h3i h2j + h2i h3j, h3i h3j]
	// with h_i the i-th column of H.
	vij := func(H [3][3]float64, i, j int) []float64 {
		hi := [3]float64{H[0][i], H[1][i], H[2][i]}
		hj := [3]float64{H[0][j], H[1][j], H[2][j]}
		return []float64{
			hi[0] * hj[0], hi[0]*hj[1] + hi[1]*hj[0], hi[1] * hj[1],
			hi[2]*hj[0] + hi[0]*hj[2], hi[2]*hj[1] + hi[1]*hj[2], hi[2] * hj[2],
		}
	}
	// Condition: scale pixel coordinates by a rough size first.
	var scale float64
	for _, H := range hs {
		scale = math.Max(scale, math.Abs(H[0][2]/H[2][2]))
		scale = math.Max(scale, math.Abs(H[1][2]/H[2][2]))
	}
	if scale == 0 {
		scale = 1
	}
	S := [3][3]float64{{1 / scale, 0, 0}, {0, 1 / scale, 0}, {0, 0, 1}}
	a := mat.NewDense(2*len(hs)+1, 6, nil)
	for k, H0 := range hs {
		H := mul3(S, H0)
		v12 := vij(H, 0, 1)
		v11, v22 := vij(H, 0, 0), vij(H, 1, 1)
		d := make([]float64, 6)
		for i := range d {
			d[i] = v11[i] - v22[i]
		}
		a.SetRow(2*k, v12)
		a.SetRow(2*k+1, d)
	}
	a.SetRow(2*len(hs), []float64{0, 1, 0, 0, 0, 0})
	var svd mat.SVD
	if !svd.Factorize(a, mat.SVDThinV) {
		return 0, 0, 0, 0, errors.New("closed-form intrinsics: SVD failed")
	}
	var V mat.Dense
	svd.VTo(&V)
	b := make([]float64, 6)
	for i := range b {
		b[i] = V.At(i, 5)
	}
	B11, B12, B22, B13, B23, B33 := b[0], b[1], b[2], b[3], b[4], b[5]
	den := B11*B22 - B12*B12
	if den == 0 || B11 == 0 {
		return 0, 0, 0, 0, errors.New("closed-form intrinsics: degenerate views (tilt the target differently between views)")
	}
	v0 := (B12*B13 - B11*B23) / den
	lam := B33 - (B13*B13+v0*(B12*B13-B11*B23))/B11
	al2 := lam / B11
	be2 := lam * B11 / den
	if !(al2 > 0 && be2 > 0) {
		return 0, 0, 0, 0, errors.New("closed-form intrinsics: no real focal length (views too similar or too few; tilt the target by 10–40° in different directions)")
	}
	alpha, beta := math.Sqrt(al2), math.Sqrt(be2)
	gamma := -B12 * alpha * alpha * beta / lam
	u0 := gamma*v0/beta - B13*alpha*alpha/lam
	return alpha * scale, beta * scale, u0 * scale, v0 * scale, nil
}

// zhangPose returns the pose of a plane from its homography and the camera
// matrix (Zhang 2000, §3.1): r1 = λK⁻¹h1, r2 = λK⁻¹h2, r3 = r1 × r2,
// t = λK⁻¹h3, λ = 1/|K⁻¹h1|, then the nearest rotation by SVD.
func zhangPose(H [3][3]float64, fx, fy, cx, cy float64) Pose {
	Ki := [3][3]float64{{1 / fx, 0, -cx / fx}, {0, 1 / fy, -cy / fy}, {0, 0, 1}}
	M := mul3(Ki, H)
	col := func(j int) [3]float64 { return [3]float64{M[0][j], M[1][j], M[2][j]} }
	h1, h2, h3 := col(0), col(1), col(2)
	l := 1 / norm3(h1)
	if h3[2] < 0 { // the plane must be in front of the camera
		l = -l
	}
	r1 := scale3(h1, l)
	r2 := scale3(h2, l)
	r3 := cross3(r1, r2)
	t := scale3(h3, l)
	R := mat.NewDense(3, 3, []float64{r1[0], r2[0], r3[0], r1[1], r2[1], r3[1], r1[2], r2[2], r3[2]})
	var svd mat.SVD
	var Rn [3][3]float64
	if svd.Factorize(R, mat.SVDFull) {
		var U, V mat.Dense
		svd.UTo(&U)
		svd.VTo(&V)
		var P mat.Dense
		P.Mul(&U, V.T())
		for i := range 3 {
			for j := range 3 {
				Rn[i][j] = P.At(i, j)
			}
		}
		if det3(Rn) < 0 {
			for i := range 3 {
				Rn[i][2] = -Rn[i][2]
			}
		}
	}
	return Pose{Rot: rotvec(Rn), T: t}
}

func norm3(a [3]float64) float64 { return math.Sqrt(a[0]*a[0] + a[1]*a[1] + a[2]*a[2]) }
func scale3(a [3]float64, s float64) [3]float64 {
	return [3]float64{a[0] * s, a[1] * s, a[2] * s}
}
func cross3(a, b [3]float64) [3]float64 {
	return [3]float64{a[1]*b[2] - a[2]*b[1], a[2]*b[0] - a[0]*b[2], a[0]*b[1] - a[1]*b[0]}
}

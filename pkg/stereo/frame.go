package stereo

import (
	"errors"
	"math"

	"gonum.org/v1/gonum/mat"
)

// Frame is a right-handed coordinate frame of results: a left-camera
// point p has the coordinates R·(p − Origin) in it.
type Frame struct {
	Origin [3]float64
	R      [3][3]float64
}

// Apply returns the frame coordinates of the left-camera point p.
func (f Frame) Apply(p [3]float64) [3]float64 { return mulv(f.R, sub(p, f.Origin)) }

// Vector returns the frame components of the left-camera vector v.
func (f Frame) Vector(v [3]float64) [3]float64 { return mulv(f.R, v) }

// SpecimenFrame returns the frame of the reference shape's least-squares
// plane: origin at the centroid of the accepted points, z along the
// plane's normal toward the cameras, x along the left camera's x axis
// projected on the plane, y = z × x (up the left image for a specimen
// facing the bench). In it, z is the shape's height above its mean plane
// and the third displacement component W is out of that plane. It returns
// an error if fewer than three points are accepted or they are collinear.
func SpecimenFrame(r *Reference) (Frame, error) {
	var c [3]float64
	n := 0
	for _, p := range r.Points {
		if p.Status == OK {
			for d := range 3 {
				c[d] += p.Pos[d]
			}
			n++
		}
	}
	if n < 3 {
		return Frame{}, errors.New("stereo: fewer than 3 points measured: no specimen plane")
	}
	for d := range 3 {
		c[d] /= float64(n)
	}
	S := mat.NewSymDense(3, nil)
	for _, p := range r.Points {
		if p.Status != OK {
			continue
		}
		for a := range 3 {
			for b := a; b < 3; b++ {
				S.SetSym(a, b, S.At(a, b)+(p.Pos[a]-c[a])*(p.Pos[b]-c[b]))
			}
		}
	}
	var eig mat.EigenSym
	if !eig.Factorize(S, true) {
		return Frame{}, errors.New("stereo: specimen plane: eigen decomposition failed")
	}
	vals := eig.Values(nil)
	if !(vals[1] > 1e-9*math.Max(vals[2], 1e-300)) {
		return Frame{}, errors.New("stereo: the measured points are collinear: no specimen plane")
	}
	var V mat.Dense
	eig.VectorsTo(&V)
	z := [3]float64{V.At(0, 0), V.At(1, 0), V.At(2, 0)}
	if dot(z, c) > 0 { // toward the left camera at the origin
		z = [3]float64{-z[0], -z[1], -z[2]}
	}
	x := unit([3]float64{1 - z[0]*z[0], -z[0] * z[1], -z[0] * z[2]})
	y := cross(z, x)
	return Frame{Origin: c, R: [3][3]float64{x, y, z}}, nil
}

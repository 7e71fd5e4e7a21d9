// Package calib calibrates a camera from views of a flat target and corrects
// image positions for lens distortion.
//
// The camera is a pinhole with Brown–Conrady distortion (Brown 1966,
// "Decentering distortion of lenses", Photogramm. Eng. 32(3):444): radial
// terms k1, k2, k3 and tangential (decentring) terms p1, p2, in the form
// OpenCV documents. The fit starts from the closed form of Zhang 2000 ("A
// flexible new technique for camera calibration", IEEE TPAMI 22(11):1330)
// and refines all parameters and poses by Levenberg–Marquardt (Moré 1978,
// "The Levenberg–Marquardt algorithm: implementation and theory", in
// Numerical Analysis, Springer LNM 630).
//
// Pixel coordinates have pixel centres at integers, x to the right and y
// down, as everywhere in Mottle. Target (plane) coordinates are in mm.
package calib

import (
	"errors"
	"fmt"
	"math"
)

// Camera is a pinhole camera with Brown–Conrady distortion. A point with
// normalised coordinates (x, y) = (X/Z, Y/Z) in the camera frame, r² = x²+y²,
// is distorted to
//
//	x_d = x(1 + k1 r² + k2 r⁴ + k3 r⁶) + 2 p1 x y + p2 (r² + 2x²)
//	y_d = y(1 + k1 r² + k2 r⁴ + k3 r⁶) + p1 (r² + 2y²) + 2 p2 x y
//
// and seen at the pixel (Fx x_d + Cx, Fy y_d + Cy).
type Camera struct {
	// Fx, Fy are the focal lengths in px; Cx, Cy the principal point in px.
	Fx, Fy, Cx, Cy float64
	// K1, K2, K3 are the radial and P1, P2 the tangential coefficients.
	K1, K2, K3, P1, P2 float64
}

// nIntr is the number of camera parameters in a parameter vector.
const nIntr = 9

// ParamNames returns the names of the camera parameters in the order of
// the standard deviations in a Result: fx, fy, cx, cy, k1, k2, p1, p2, k3.
func ParamNames() [nIntr]string {
	return [nIntr]string{"fx", "fy", "cx", "cy", "k1", "k2", "p1", "p2", "k3"}
}

func (c Camera) vector() [nIntr]float64 {
	return [nIntr]float64{c.Fx, c.Fy, c.Cx, c.Cy, c.K1, c.K2, c.P1, c.P2, c.K3}
}

func cameraFrom(v []float64) Camera {
	return Camera{Fx: v[0], Fy: v[1], Cx: v[2], Cy: v[3], K1: v[4], K2: v[5], P1: v[6], P2: v[7], K3: v[8]}
}

// Validate reports a camera whose focal lengths are not positive or whose
// parameters are not finite.
func (c Camera) Validate() error {
	var errs []error
	for i, v := range c.vector() {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			errs = append(errs, fmt.Errorf("camera %s = %g: use a finite number", ParamNames()[i], v))
		}
	}
	if !(c.Fx > 0 && c.Fy > 0) {
		errs = append(errs, fmt.Errorf("camera focal lengths fx = %g, fy = %g px: use positive values", c.Fx, c.Fy))
	}
	return errors.Join(errs...)
}

// Distort applies the distortion to normalised coordinates.
func (c Camera) Distort(x, y float64) (xd, yd float64) {
	r2 := x*x + y*y
	rad := 1 + r2*(c.K1+r2*(c.K2+r2*c.K3))
	return x*rad + 2*c.P1*x*y + c.P2*(r2+2*x*x),
		y*rad + c.P1*(r2+2*y*y) + 2*c.P2*x*y
}

// ErrUndistort is returned when the distortion cannot be inverted at a
// point (far outside the field the lens was calibrated over).
var ErrUndistort = errors.New("lens distortion cannot be inverted here")

// Undistort inverts Distort by Newton's method, to 1e-13 in normalised
// coordinates. It returns an error wrapping ErrUndistort if it does not
// converge.
func (c Camera) Undistort(xd, yd float64) (x, y float64, err error) {
	x, y = xd, yd
	for range 40 {
		fx, fy := c.Distort(x, y)
		rx, ry := fx-xd, fy-yd
		if rx*rx+ry*ry < 1e-26 {
			return x, y, nil
		}
		j := c.distortJacobian(x, y)
		det := j[0][0]*j[1][1] - j[0][1]*j[1][0]
		if !(math.Abs(det) > 1e-9) {
			break
		}
		x -= (j[1][1]*rx - j[0][1]*ry) / det
		y -= (j[0][0]*ry - j[1][0]*rx) / det
	}
	return x, y, fmt.Errorf("%w: normalised point (%.4g, %.4g)", ErrUndistort, xd, yd)
}

// distortJacobian returns ∂(x_d, y_d)/∂(x, y).
func (c Camera) distortJacobian(x, y float64) [2][2]float64 {
	r2 := x*x + y*y
	rad := 1 + r2*(c.K1+r2*(c.K2+r2*c.K3))
	drad := c.K1 + r2*(2*c.K2+3*r2*c.K3)
	xy := 2*x*y*drad + 2*c.P1*x + 2*c.P2*y
	return [2][2]float64{
		{rad + 2*x*x*drad + 2*c.P1*y + 6*c.P2*x, xy},
		{xy, rad + 2*y*y*drad + 6*c.P1*y + 2*c.P2*x},
	}
}

// Project returns the pixel at which the camera-frame point p is seen; ok is
// false for a point not in front of the camera.
func (c Camera) Project(p [3]float64) (x, y float64, ok bool) {
	if !(p[2] > 0) {
		return 0, 0, false
	}
	xd, yd := c.Distort(p[0]/p[2], p[1]/p[2])
	return c.Fx*xd + c.Cx, c.Fy*yd + c.Cy, true
}

// Normalize returns the undistorted normalised coordinates (the ray
// direction (x, y, 1)) of the pixel (x, y).
func (c Camera) Normalize(px, py float64) (x, y float64, err error) {
	return c.Undistort((px-c.Cx)/c.Fx, (py-c.Cy)/c.Fy)
}

// UndistortPixel returns where the pixel (x, y) would be seen by the same
// camera without distortion: Fx·x_n + Cx, Fy·y_n + Cy.
func (c Camera) UndistortPixel(px, py float64) (x, y float64, err error) {
	xn, yn, err := c.Normalize(px, py)
	if err != nil {
		return 0, 0, err
	}
	return c.Fx*xn + c.Cx, c.Fy*yn + c.Cy, nil
}

// Pose places the target plane in the camera frame: the plane point
// (X, Y, 0) is at R·(X, Y, 0) + T. R is stored as a rotation vector
// (axis × angle in radians, Rodrigues' formula).
type Pose struct {
	Rot [3]float64 `json:"rotation_vector"`
	T   [3]float64 `json:"translation_mm"`
}

// Matrix returns the rotation matrix of p.
func (p Pose) Matrix() [3][3]float64 { return rodrigues(p.Rot) }

// Apply returns the camera-frame position of the plane point (X, Y).
func (p Pose) Apply(X, Y float64) [3]float64 {
	R := p.Matrix()
	return applyRT(&R, p.T, X, Y)
}

func applyRT(R *[3][3]float64, T [3]float64, X, Y float64) [3]float64 {
	return [3]float64{
		R[0][0]*X + R[0][1]*Y + T[0],
		R[1][0]*X + R[1][1]*Y + T[1],
		R[2][0]*X + R[2][1]*Y + T[2],
	}
}

// Tilt returns the angle in degrees between the plane's normal and the
// camera's optical axis.
func (p Pose) Tilt() float64 {
	R := p.Matrix()
	return math.Acos(math.Min(1, math.Abs(R[2][2]))) * 180 / math.Pi
}

// rodrigues converts a rotation vector to a matrix.
func rodrigues(w [3]float64) [3][3]float64 {
	th := math.Sqrt(w[0]*w[0] + w[1]*w[1] + w[2]*w[2])
	if th < 1e-12 {
		return [3][3]float64{{1, -w[2], w[1]}, {w[2], 1, -w[0]}, {-w[1], w[0], 1}}
	}
	k := [3]float64{w[0] / th, w[1] / th, w[2] / th}
	c, s := math.Cos(th), math.Sin(th)
	v := 1 - c
	return [3][3]float64{
		{c + k[0]*k[0]*v, k[0]*k[1]*v - k[2]*s, k[0]*k[2]*v + k[1]*s},
		{k[1]*k[0]*v + k[2]*s, c + k[1]*k[1]*v, k[1]*k[2]*v - k[0]*s},
		{k[2]*k[0]*v - k[1]*s, k[2]*k[1]*v + k[0]*s, c + k[2]*k[2]*v},
	}
}

// rotvec converts a rotation matrix to a rotation vector.
func rotvec(R [3][3]float64) [3]float64 {
	c := (R[0][0] + R[1][1] + R[2][2] - 1) / 2
	c = math.Max(-1, math.Min(1, c))
	th := math.Acos(c)
	if th < 1e-9 {
		return [3]float64{(R[2][1] - R[1][2]) / 2, (R[0][2] - R[2][0]) / 2, (R[1][0] - R[0][1]) / 2}
	}
	if math.Pi-th < 1e-6 {
		// Near π: take the axis from the diagonal.
		k := [3]float64{
			math.Sqrt(math.Max(0, (R[0][0]+1)/2)),
			math.Sqrt(math.Max(0, (R[1][1]+1)/2)),
			math.Sqrt(math.Max(0, (R[2][2]+1)/2)),
		}
		if R[0][1] < 0 {
			k[1] = -k[1]
		}
		if R[0][2] < 0 {
			k[2] = -k[2]
		}
		return [3]float64{k[0] * th, k[1] * th, k[2] * th}
	}
	s := 2 * math.Sin(th)
	return [3]float64{(R[2][1] - R[1][2]) / s * th, (R[0][2] - R[2][0]) / s * th, (R[1][0] - R[0][1]) / s * th}
}

// PlanePoint returns the plane point (mm) seen at the pixel (x, y) when the
// plane has pose p: the distortion undone and the ray intersected with the
// plane. It returns an error if the ray misses the plane in front of the
// camera or the distortion cannot be inverted.
func (c Camera) PlanePoint(p Pose, px, py float64) (X, Y float64, err error) {
	xn, yn, err := c.Normalize(px, py)
	if err != nil {
		return 0, 0, err
	}
	R := p.Matrix()
	// X r1 + Y r2 + T = s (xn, yn, 1): eliminate s with the third row.
	a11, a12 := R[0][0]-xn*R[2][0], R[0][1]-xn*R[2][1]
	a21, a22 := R[1][0]-yn*R[2][0], R[1][1]-yn*R[2][1]
	b1, b2 := xn*p.T[2]-p.T[0], yn*p.T[2]-p.T[1]
	det := a11*a22 - a12*a21
	if !(math.Abs(det) > 1e-12) {
		return 0, 0, fmt.Errorf("pixel (%g, %g): its ray is parallel to the target plane", px, py)
	}
	X = (b1*a22 - a12*b2) / det
	Y = (a11*b2 - a21*b1) / det
	if s := R[2][0]*X + R[2][1]*Y + p.T[2]; !(s > 0) {
		return 0, 0, fmt.Errorf("pixel (%g, %g): its ray meets the target plane behind the camera", px, py)
	}
	return X, Y, nil
}

// PoseFromMatrix returns the pose with rotation matrix R (which must be a
// rotation) and translation T.
func PoseFromMatrix(R [3][3]float64, T [3]float64) Pose {
	return Pose{Rot: rotvec(R), T: T}
}

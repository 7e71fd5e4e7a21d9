package synth

import (
	"errors"
	"fmt"
	"math"

	"github.com/mottledic/mottle/pkg/imageio"
)

// Surface is anything with a grey value at every point of its plane: a
// speckle Pattern, a Checkerboard or a DotGrid.
type Surface interface {
	// Value returns the grey fraction in [0, 1] at the plane point (X, Y).
	Value(X, Y float64) float64
}

// Lens is an exact pinhole camera with Brown–Conrady distortion (Brown 1966,
// "Decentering distortion of lenses", Photogramm. Eng. 32(3):444), in the
// form OpenCV documents: for normalised coordinates (x, y) = (X/Z, Y/Z) of a
// point in the camera frame and r² = x² + y²,
//
//	x_d = x(1 + k1 r² + k2 r⁴ + k3 r⁶) + 2 p1 x y + p2 (r² + 2x²)
//	y_d = y(1 + k1 r² + k2 r⁴ + k3 r⁶) + p1 (r² + 2y²) + 2 p2 x y
//
// and the pixel is (Fx x_d + Cx, Fy y_d + Cy), pixel centres at integers.
// It is the renderer's own implementation, kept apart from pkg/calib so the
// truth of calibration tests does not share code with what they test.
type Lens struct {
	Fx, Fy, Cx, Cy     float64
	K1, K2, K3, P1, P2 float64
}

// Distort applies the lens distortion to normalised coordinates.
func (l Lens) Distort(x, y float64) (xd, yd float64) {
	r2 := x * x
	r2 += y * y
	rad := 1 + r2*(l.K1+r2*(l.K2+r2*l.K3))
	xd = x*rad + 2*l.P1*x*y + l.P2*(r2+2*x*x)
	yd = y*rad + l.P1*(r2+2*y*y) + 2*l.P2*x*y
	return xd, yd
}

// Undistort inverts Distort by Newton's method with the exact Jacobian, to
// 1e-14 in normalised coordinates. It returns ErrNoInverse if that fails.
func (l Lens) Undistort(xd, yd float64) (x, y float64, err error) {
	x, y = xd, yd
	for it := 0; it < 50; it++ {
		fx, fy := l.Distort(x, y)
		rx, ry := fx-xd, fy-yd
		if rx*rx+ry*ry < 1e-28 {
			return x, y, nil
		}
		r2 := x*x + y*y
		rad := 1 + r2*(l.K1+r2*(l.K2+r2*l.K3))
		drad := l.K1 + r2*(2*l.K2+3*r2*l.K3) // d rad / d r²
		a := rad + 2*x*x*drad + 2*l.P1*y + 6*l.P2*x
		b := 2*x*y*drad + 2*l.P1*x + 2*l.P2*y
		c := 2*x*y*drad + 2*l.P1*x + 2*l.P2*y
		d := rad + 2*y*y*drad + 6*l.P1*y + 2*l.P2*x
		det := a*d - b*c
		if !(math.Abs(det) > 1e-12) {
			break
		}
		x -= (d*rx - b*ry) / det
		y -= (a*ry - c*rx) / det
	}
	return x, y, fmt.Errorf("%w: lens undistortion at (%g, %g)", ErrNoInverse, xd, yd)
}

// Pose places a plane in front of a camera: a plane point (X, Y) (the
// plane's own coordinates, Z = 0) is at R·(X, Y, 0) + T in the camera frame.
type Pose struct {
	R [3][3]float64
	T [3]float64
}

// PoseFromAngles returns the pose with rotation R = Rz(rz)·Ry(ry)·Rx(rx)
// (angles in radians) and translation t.
func PoseFromAngles(rx, ry, rz float64, t [3]float64) Pose {
	cx, sx := math.Cos(rx), math.Sin(rx)
	cy, sy := math.Cos(ry), math.Sin(ry)
	cz, sz := math.Cos(rz), math.Sin(rz)
	Rx := [3][3]float64{{1, 0, 0}, {0, cx, -sx}, {0, sx, cx}}
	Ry := [3][3]float64{{cy, 0, sy}, {0, 1, 0}, {-sy, 0, cy}}
	Rz := [3][3]float64{{cz, -sz, 0}, {sz, cz, 0}, {0, 0, 1}}
	return Pose{R: mul3(Rz, mul3(Ry, Rx)), T: t}
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

// View is a camera looking at a surface lying in a plane: the surface point
// S (in surface units) moves in its plane by Motion to S' = Motion(S), sits
// at the plane point Unit·S' (plane units, e.g. mm) and is seen at the pixel
// Lens(Pose(Unit·S')). View is the exact inverse camera model the renderer
// integrates pixels through.
type View struct {
	Lens Lens
	Pose Pose
	// Unit is the size in plane units of one surface unit. Default 1.
	Unit float64
	// Motion moves the surface within its plane, in surface units; nil means
	// none.
	Motion Motion
}

func (v View) unit() float64 {
	if v.Unit == 0 {
		return 1
	}
	return v.Unit
}

// Project returns the pixel at which the surface point (X, Y) is seen. ok is
// false if the point is behind the camera.
func (v View) Project(X, Y float64) (x, y float64, ok bool) {
	if v.Motion != nil {
		X, Y = v.Motion.Map(X, Y)
	}
	u := v.unit()
	X, Y = X*u, Y*u
	R, T := v.Pose.R, v.Pose.T
	cx := R[0][0]*X + R[0][1]*Y + T[0]
	cy := R[1][0]*X + R[1][1]*Y + T[1]
	cz := R[2][0]*X + R[2][1]*Y + T[2]
	if !(cz > 0) {
		return 0, 0, false
	}
	xd, yd := v.Lens.Distort(cx/cz, cy/cz)
	return v.Lens.Fx*xd + v.Lens.Cx, v.Lens.Fy*yd + v.Lens.Cy, true
}

// Inverse returns the surface point seen at the pixel (x, y): the lens
// distortion undone, the ray intersected with the plane, the in-plane motion
// inverted. It returns an error wrapping ErrNoMaterial if the ray misses the
// plane in front of the camera, or ErrNoInverse if an inversion failed.
func (v View) Inverse(x, y float64) (X, Y float64, err error) {
	xn, yn, err := v.Lens.Undistort((x-v.Lens.Cx)/v.Lens.Fx, (y-v.Lens.Cy)/v.Lens.Fy)
	if err != nil {
		return 0, 0, err
	}
	// Solve X r1 + Y r2 + T = s (xn, yn, 1) for X, Y, s by Cramer's rule.
	R, T := v.Pose.R, v.Pose.T
	a := [3][3]float64{
		{R[0][0], R[0][1], -xn},
		{R[1][0], R[1][1], -yn},
		{R[2][0], R[2][1], -1},
	}
	b := [3]float64{-T[0], -T[1], -T[2]}
	det := det3(a)
	if !(math.Abs(det) > 1e-15) {
		return 0, 0, fmt.Errorf("%w: the ray of pixel (%g, %g) is parallel to the plane", ErrNoMaterial, x, y)
	}
	var sol [3]float64
	for k := range 3 {
		m := a
		for i := range 3 {
			m[i][k] = b[i]
		}
		sol[k] = det3(m) / det
	}
	if !(sol[2] > 0) {
		return 0, 0, fmt.Errorf("%w: the ray of pixel (%g, %g) meets the plane behind the camera", ErrNoMaterial, x, y)
	}
	u := v.unit()
	X, Y = sol[0]/u, sol[1]/u
	if v.Motion != nil {
		return v.Motion.Inverse(X, Y)
	}
	return X, Y, nil
}

func det3(a [3][3]float64) float64 {
	return a[0][0]*(a[1][1]*a[2][2]-a[1][2]*a[2][1]) -
		a[0][1]*(a[1][0]*a[2][2]-a[1][2]*a[2][0]) +
		a[0][2]*(a[1][0]*a[2][1]-a[1][1]*a[2][0])
}

// RenderView renders what the camera of v sees of the surface s: each pixel
// is the integral of s at the surface point v.Inverse(x) over the pixel,
// exactly as Render does for a motion, then blur, noise and quantisation.
// Samples whose ray misses the plane are drawn with o.Void.
func RenderView(s Surface, v View, o RenderOptions) (*imageio.Gray, Report, error) {
	if s == nil {
		return nil, Report{}, errors.New("render view: nil surface")
	}
	if !(v.Lens.Fx > 0 && v.Lens.Fy > 0) {
		return nil, Report{}, fmt.Errorf("render view: focal lengths %g, %g px: use positive values", v.Lens.Fx, v.Lens.Fy)
	}
	return render(s, v, o)
}

// Checkerboard is a printed checkerboard target lying at plane coordinates
// [0, Cols·Square]×[0, Rows·Square] (plane units, e.g. mm) on a light
// background: square (i, j), i along X, is dark when i + j is even. Light
// marker discs of diameter MarkerDiameter sit at the centres of the squares
// listed in Markers. Edges are smooth over a width Edge (ink spread and
// print resolution), which keeps pixel integration exact.
type Checkerboard struct {
	Cols, Rows     int
	Square, Edge   float64
	Markers        [][2]int
	MarkerDiameter float64
	// Dark and Light are the grey fractions of ink and paper; zero values
	// mean 0.1 and 0.9.
	Dark, Light float64
}

func levels(dark, light float64) (float64, float64) {
	if dark == 0 {
		dark = 0.1
	}
	if light == 0 {
		light = 0.9
	}
	return dark, light
}

// ramp is a smooth step from 0 at d = −w/2 to 1 at d = w/2 (a sharp step
// when w is 0).
func ramp(d, w float64) float64 {
	if w <= 0 {
		if d >= 0 {
			return 1
		}
		return 0
	}
	return smootherstep(d/w + 0.5)
}

// squareWave returns +1 inside even cells of pitch s along one axis and −1
// inside odd ones, with smooth transitions of width w at the cell lines.
func squareWave(X, s, w float64) float64 {
	k := math.Round(X / s)
	d := X - k*s
	left, right := 1.0, 1.0
	if int(k)%2 == 0 { // cell k is even, cell k−1 odd
		left = -1
	} else {
		right = -1
	}
	t := ramp(d, w)
	return left*(1-t) + right*t
}

// Value returns the grey fraction at the plane point (X, Y).
func (c Checkerboard) Value(X, Y float64) float64 {
	dark, light := levels(c.Dark, c.Light)
	s := c.Square
	wx, wy := float64(c.Cols)*s, float64(c.Rows)*s
	mask := ramp(X, c.Edge) * ramp(wx-X, c.Edge) * ramp(Y, c.Edge) * ramp(wy-Y, c.Edge)
	if mask == 0 {
		return light
	}
	ink := (1 + squareWave(X, s, c.Edge)*squareWave(Y, s, c.Edge)) / 2 * mask
	for _, m := range c.Markers {
		dx := X - (float64(m[0])+0.5)*s
		dy := Y - (float64(m[1])+0.5)*s
		rho := math.Hypot(dx, dy)
		ink *= 1 - ramp(c.MarkerDiameter/2-rho, c.Edge)
	}
	return light - (light-dark)*ink
}

// DotGrid is a printed grid of dark dots on a light background: dot (i, j)
// is centred at (i·Pitch, j·Pitch) for 0 ≤ i < Cols, 0 ≤ j < Rows, with
// diameter Diameter, or BigDiameter for the dots listed in Big (the
// orientation marker). Edges are smooth over a width Edge.
type DotGrid struct {
	Cols, Rows            int
	Pitch, Diameter, Edge float64
	Big                   [][2]int
	BigDiameter           float64
	// Dark and Light are the grey fractions of ink and paper; zero values
	// mean 0.1 and 0.9.
	Dark, Light float64
}

// Value returns the grey fraction at the plane point (X, Y).
func (g DotGrid) Value(X, Y float64) float64 {
	dark, light := levels(g.Dark, g.Light)
	i0, j0 := int(math.Round(X/g.Pitch)), int(math.Round(Y/g.Pitch))
	ink := 0.0
	for j := j0 - 1; j <= j0+1; j++ {
		for i := i0 - 1; i <= i0+1; i++ {
			if i < 0 || j < 0 || i >= g.Cols || j >= g.Rows {
				continue
			}
			d := g.Diameter
			for _, b := range g.Big {
				if b[0] == i && b[1] == j {
					d = g.BigDiameter
				}
			}
			rho := math.Hypot(X-float64(i)*g.Pitch, Y-float64(j)*g.Pitch)
			ink = math.Max(ink, ramp(d/2-rho, g.Edge))
		}
	}
	return light - (light-dark)*ink
}

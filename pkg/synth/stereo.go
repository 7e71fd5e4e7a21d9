package synth

import (
	"errors"
	"fmt"
	"image"
	"math"

	"github.com/mottledic/mottle/pkg/imageio"
)

// Shape is a surface in space with material coordinates (s, t) in mm, in
// its own frame. Shapes face +z: cameras look at them from z > 0.
type Shape interface {
	// Point returns the position of the material point (s, t).
	Point(s, t float64) [3]float64
	// Hit returns the material point where the ray o + λd (λ > 0) first
	// meets the surface from its front side; ok is false if it misses.
	Hit(o, d [3]float64) (s, t float64, ok bool)
}

// Plane is the plane z = 0 with s = x, t = y.
type Plane struct{}

// Point returns (s, t, 0).
func (Plane) Point(s, t float64) [3]float64 { return [3]float64{s, t, 0} }

// Hit intersects the ray with z = 0.
func (Plane) Hit(o, d [3]float64) (float64, float64, bool) {
	if !(math.Abs(d[2]) > 1e-15) {
		return 0, 0, false
	}
	l := -o[2] / d[2]
	if !(l > 0) {
		return 0, 0, false
	}
	return o[0] + l*d[0], o[1] + l*d[1], true
}

// Cylinder is a circular cylinder of radius R whose axis runs along y
// through (0, 0, −R): its crest is the line x = z = 0 and it bulges toward
// +z. s is the arc length from the crest (positive toward +x), t = y.
type Cylinder struct{ R float64 }

// Point returns (R sin(s/R), t, R cos(s/R) − R).
func (c Cylinder) Point(s, t float64) [3]float64 {
	a := s / c.R
	return [3]float64{c.R * math.Sin(a), t, c.R*math.Cos(a) - c.R}
}

// Hit intersects the ray with the front half (z > −R) of the cylinder.
func (c Cylinder) Hit(o, d [3]float64) (float64, float64, bool) {
	// (ox + λdx)² + (oz + R + λdz)² = R².
	oz := o[2] + c.R
	a := d[0]*d[0] + d[2]*d[2]
	b := 2 * (o[0]*d[0] + oz*d[2])
	q := o[0]*o[0] + oz*oz - c.R*c.R
	disc := b*b - 4*a*q
	if !(a > 0) || disc < 0 {
		return 0, 0, false
	}
	sq := math.Sqrt(disc)
	// The numerically stable pair of roots; the smaller positive is the
	// first hit.
	var l1, l2 float64
	if b < 0 {
		l1 = (-b + sq) / (2 * a)
	} else {
		l1 = (-b - sq) / (2 * a)
	}
	l2 = q / (a * l1)
	l := math.Min(l1, l2)
	if !(l > 0) {
		l = math.Max(l1, l2)
	}
	if !(l > 0) {
		return 0, 0, false
	}
	x, y, z := o[0]+l*d[0], o[1]+l*d[1], oz+l*d[2]
	if !(z > 0) {
		return 0, 0, false
	}
	return c.R * math.Atan2(x, z), y, true
}

// Bulge is a flat plate z = 0 with a circular bulge of radius A and height
// W0 at the origin: z = W0 (1 − r²/A²)² for r < A, the deflection of a
// clamped circular plate under uniform pressure (Timoshenko &
// Woinowsky-Krieger 1959, "Theory of Plates and Shells", §62). s = x, t = y:
// a material point of the flat plate keeps its x and y and rises by z.
type Bulge struct{ A, W0 float64 }

// W returns the height at (x, y) and its gradient.
func (b Bulge) W(x, y float64) (w, wx, wy float64) {
	r2 := (x*x + y*y) / (b.A * b.A)
	if r2 >= 1 {
		return 0, 0, 0
	}
	g := 1 - r2
	w = b.W0 * g * g
	dw := -4 * b.W0 * g / (b.A * b.A) // ∂w/∂x = dw·x
	return w, dw * x, dw * y
}

// Point returns (s, t, w(s, t)).
func (b Bulge) Point(s, t float64) [3]float64 {
	w, _, _ := b.W(s, t)
	return [3]float64{s, t, w}
}

// Hit solves o_z + λd_z = w(o_xy + λd_xy) by Newton's method from the
// intersection with z = 0.
func (b Bulge) Hit(o, d [3]float64) (float64, float64, bool) {
	if !(math.Abs(d[2]) > 1e-15) {
		return 0, 0, false
	}
	l := -o[2] / d[2]
	for range 60 {
		x, y := o[0]+l*d[0], o[1]+l*d[1]
		w, wx, wy := b.W(x, y)
		f := o[2] + l*d[2] - w
		df := d[2] - wx*d[0] - wy*d[1]
		if !(math.Abs(df) > 1e-15) {
			return 0, 0, false
		}
		dl := f / df
		l -= dl
		if math.Abs(dl) < 1e-12*math.Max(1, math.Abs(l)) {
			if !(l > 0) {
				return 0, 0, false
			}
			return o[0] + l*d[0], o[1] + l*d[1], true
		}
	}
	return 0, 0, false
}

// Placement puts a shape in the world: the material point (s, t) moves
// within the shape by Motion to (s', t') = Motion(s, t) and sits at the
// world position R·Shape.Point(s', t') + T. The pattern is painted on the
// material coordinates (s, t) in mm.
type Placement struct {
	Shape Shape
	// Motion moves material points within the shape; nil means none.
	Motion Motion
	// Pose is the rigid placement shape frame → world (Pose.R·p + Pose.T).
	// The zero value means the identity.
	Pose Pose
}

func (p Placement) pose() Pose {
	if p.Pose.R == ([3][3]float64{}) {
		return Pose{R: [3][3]float64{{1, 0, 0}, {0, 1, 0}, {0, 0, 1}}, T: p.Pose.T}
	}
	return p.Pose
}

// Position returns the world position of the material point (s, t).
func (p Placement) Position(s, t float64) [3]float64 {
	if p.Motion != nil {
		s, t = p.Motion.Map(s, t)
	}
	q := p.Shape.Point(s, t)
	ps := p.pose()
	return apply(ps, q)
}

func apply(p Pose, q [3]float64) [3]float64 {
	var r [3]float64
	for i := range 3 {
		r[i] = p.R[i][0]*q[0] + p.R[i][1]*q[1] + p.R[i][2]*q[2] + p.T[i]
	}
	return r
}

// Cam is a camera in the world: a world point P is at Pose.R·P + Pose.T in
// the camera frame (z along the optical axis), seen through Lens.
type Cam struct {
	Lens Lens
	Pose Pose
}

// LookAt returns the pose of a camera at the world position c looking at
// the world point at, with its image y axis as close as possible to the
// world direction down.
func LookAt(c, at, down [3]float64) Pose {
	z := sub3(at, c)
	z = unit3(z)
	x := unit3(cross3(down, z))
	y := cross3(z, x)
	R := [3][3]float64{x, y, z}
	var T [3]float64
	for i := range 3 {
		T[i] = -(R[i][0]*c[0] + R[i][1]*c[1] + R[i][2]*c[2])
	}
	return Pose{R: R, T: T}
}

func sub3(a, b [3]float64) [3]float64 { return [3]float64{a[0] - b[0], a[1] - b[1], a[2] - b[2]} }

func cross3(a, b [3]float64) [3]float64 {
	return [3]float64{a[1]*b[2] - a[2]*b[1], a[2]*b[0] - a[0]*b[2], a[0]*b[1] - a[1]*b[0]}
}

func unit3(a [3]float64) [3]float64 {
	n := math.Sqrt(a[0]*a[0] + a[1]*a[1] + a[2]*a[2])
	return [3]float64{a[0] / n, a[1] / n, a[2] / n}
}

// Project returns the pixel at which the world point P is seen; ok is
// false if P is not in front of the camera.
func (c Cam) Project(P [3]float64) (x, y float64, ok bool) {
	q := apply(c.Pose, P)
	if !(q[2] > 0) {
		return 0, 0, false
	}
	xd, yd := c.Lens.Distort(q[0]/q[2], q[1]/q[2])
	return c.Lens.Fx*xd + c.Lens.Cx, c.Lens.Fy*yd + c.Lens.Cy, true
}

// surfaceView is the inverse camera model of a placed shape: the
// material point seen at a pixel.
type surfaceView struct {
	cam Cam
	pl  Placement
	// o, ol: the camera centre in the world and in the shape frame.
	ol [3]float64
	// m: camera frame → shape frame rotation (Plᵀ Rcᵀ).
	m [3][3]float64
}

func newSurfaceView(c Cam, p Placement) surfaceView {
	ps := p.pose()
	R := c.Pose.R
	var o [3]float64 // camera centre in the world: −Rᵀ T
	for i := range 3 {
		o[i] = -(R[0][i]*c.Pose.T[0] + R[1][i]*c.Pose.T[1] + R[2][i]*c.Pose.T[2])
	}
	d := sub3(o, ps.T)
	var v surfaceView
	v.cam, v.pl = c, p
	for i := range 3 {
		v.ol[i] = ps.R[0][i]*d[0] + ps.R[1][i]*d[1] + ps.R[2][i]*d[2]
	}
	for i := range 3 {
		for j := range 3 {
			var s float64
			for k := range 3 {
				s += ps.R[k][i] * R[j][k]
			}
			v.m[i][j] = s
		}
	}
	return v
}

// Inverse returns the reference material point seen at the pixel (x, y).
func (v surfaceView) Inverse(x, y float64) (float64, float64, error) {
	l := v.cam.Lens
	xn, yn, err := l.Undistort((x-l.Cx)/l.Fx, (y-l.Cy)/l.Fy)
	if err != nil {
		return 0, 0, err
	}
	dc := [3]float64{xn, yn, 1}
	var d [3]float64
	for i := range 3 {
		d[i] = v.m[i][0]*dc[0] + v.m[i][1]*dc[1] + v.m[i][2]*dc[2]
	}
	s, t, ok := v.pl.Shape.Hit(v.ol, d)
	if !ok {
		return 0, 0, fmt.Errorf("%w: the ray of pixel (%g, %g) misses the surface", ErrNoMaterial, x, y)
	}
	if v.pl.Motion != nil {
		return v.pl.Motion.Inverse(s, t)
	}
	return s, t, nil
}

// RenderSurface renders what camera c sees of the surface pattern s
// (painted on the material coordinates in mm) on the placed shape p: each
// pixel's sub-samples are cast as rays through the exact inverse lens
// model onto the shape, taken back through the motion to the material
// coordinates, and the pattern integrated there, exactly as Render does;
// then blur, noise and quantisation. Rays that miss the surface see o.Void.
func RenderSurface(s Surface, p Placement, c Cam, o RenderOptions) (*imageio.Gray, Report, error) {
	if s == nil {
		return nil, Report{}, errors.New("render surface: nil pattern")
	}
	if p.Shape == nil {
		return nil, Report{}, errors.New("render surface: nil shape: use Plane{}, Cylinder{R} or Bulge{A, W0}")
	}
	if !(c.Lens.Fx > 0 && c.Lens.Fy > 0) {
		return nil, Report{}, fmt.Errorf("render surface: focal lengths %g, %g px: use positive values", c.Lens.Fx, c.Lens.Fy)
	}
	return render(s, newSurfaceView(c, p), o)
}

// RenderSurfaceWindow is RenderSurface restricted to the pixels of win
// (x0 ≤ x < x1, y0 ≤ y < y1): the samples of every other pixel see o.Void
// without being cast, so that a test measuring part of a large image pays
// only for that part. Samples outside win count as void in the Report.
func RenderSurfaceWindow(s Surface, p Placement, c Cam, o RenderOptions, win image.Rectangle) (*imageio.Gray, Report, error) {
	if win.Empty() {
		return nil, Report{}, fmt.Errorf("render surface: empty window %v: give x0 < x1 and y0 < y1", win)
	}
	if s == nil || p.Shape == nil || !(c.Lens.Fx > 0 && c.Lens.Fy > 0) {
		return RenderSurface(s, p, c, o)
	}
	return render(s, windowView{newSurfaceView(c, p), win}, o)
}

// windowView is a surfaceView seen only through a window of pixels.
type windowView struct {
	v   surfaceView
	win image.Rectangle
}

// errOutsideWindow marks the samples of pixels outside the window.
var errOutsideWindow = fmt.Errorf("%w: outside the rendered window", ErrNoMaterial)

func (w windowView) Inverse(x, y float64) (float64, float64, error) {
	px, py := math.Round(x), math.Round(y)
	if px < float64(w.win.Min.X) || py < float64(w.win.Min.Y) || px >= float64(w.win.Max.X) || py >= float64(w.win.Max.Y) {
		return 0, 0, errOutsideWindow
	}
	return w.v.Inverse(x, y)
}

// SeenAt returns the reference material point that camera c sees at the
// pixel (x, y) of the placed shape p, the inverse RenderSurface uses.
func SeenAt(p Placement, c Cam, x, y float64) (s, t float64, err error) {
	return newSurfaceView(c, p).Inverse(x, y)
}

// BenchRig returns the two cameras of the invented stereo bench used by the
// stereo tests and demos: each 500 mm from the world origin, turned ∓12.5°
// about the world y axis (25° between the optical axes), both aimed at the
// origin, with a field of about 100 mm across w px and mildly different
// lenses with barrel distortion. The specimen faces +z; the image x axis
// runs along world x and the image y axis along world −y.
func BenchRig(w, h int) (left, right Cam) {
	f := float64(w) * 500 / 100
	mk := func(deg float64, l Lens) Cam {
		a := deg * math.Pi / 180
		c := [3]float64{500 * math.Sin(a), 0, 500 * math.Cos(a)}
		return Cam{Lens: l, Pose: LookAt(c, [3]float64{}, [3]float64{0, -1, 0})}
	}
	cx, cy := float64(w-1)/2, float64(h-1)/2
	left = mk(-12.5, Lens{Fx: f, Fy: f * 1.001, Cx: cx + 0.011*float64(w), Cy: cy - 0.008*float64(h), K1: -0.32, K2: 0.9, P1: 2e-4, P2: -1e-4})
	right = mk(12.5, Lens{Fx: f * 0.995, Fy: f * 0.996, Cx: cx - 0.009*float64(w), Cy: cy + 0.006*float64(h), K1: -0.25, K2: 0.6, P1: -1e-4, P2: 2e-4})
	return left, right
}

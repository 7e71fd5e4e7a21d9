package synth

import (
	"image"
	"math"
	"testing"
)

// TestSurfaceRoundTrip checks the exact inverse camera model of the stereo
// scene against the forward one: a material point projected by a camera
// of the bench and cast back from its pixel is the same point, on every
// shape, with and without motion (the ray-surface intersections are closed
// forms: a plane, a quadric, and a 1D Newton solve for the plate bulge).
func TestSurfaceRoundTrip(t *testing.T) {
	l, r := BenchRig(1024, 768)
	tilt := PoseFromAngles(0, 20*math.Pi/180, 0, [3]float64{})
	cases := []struct {
		name string
		p    Placement
	}{
		{"plane", Placement{Shape: Plane{}}},
		{"tilted plane stretched", Placement{Shape: Plane{}, Pose: tilt, Motion: Affine{F: [2][2]float64{{1.005, 0}, {0, 1}}}}},
		{"cylinder", Placement{Shape: Cylinder{R: 60}}},
		{"bulge", Placement{Shape: Bulge{A: 40, W0: 3}}},
		{"moved plane", Placement{Shape: Plane{}, Pose: Pose{R: PoseFromAngles(0.01, -0.02, 0.03, [3]float64{}).R, T: [3]float64{0.5, -0.3, 1}}}},
	}
	for _, c := range cases {
		var worst float64
		for _, cam := range []Cam{l, r} {
			for s := -40.0; s <= 40; s += 8 {
				for u := -30.0; u <= 30; u += 6 {
					x, y, ok := cam.Project(c.p.Position(s, u))
					if !ok {
						t.Fatalf("%s: (%g, %g) behind the camera", c.name, s, u)
					}
					s2, u2, err := SeenAt(c.p, cam, x, y)
					if err != nil {
						t.Fatalf("%s: (%g, %g): %v", c.name, s, u, err)
					}
					worst = math.Max(worst, math.Hypot(s2-s, u2-u))
				}
			}
		}
		if worst > 1e-8 {
			t.Errorf("%s: round trip error up to %.2e mm", c.name, worst)
		}
	}
	// The bench: 500 mm from the origin, 25° between the optical axes.
	zl, zr := l.Pose.R[2], r.Pose.R[2]
	ang := math.Acos(zl[0]*zr[0]+zl[1]*zr[1]+zl[2]*zr[2]) * 180 / math.Pi
	if math.Abs(ang-25) > 1e-9 || math.Abs(math.Hypot(l.Pose.T[0], math.Hypot(l.Pose.T[1], l.Pose.T[2]))-500) > 1e-9 {
		t.Errorf("bench: angle %g°, distance %v", ang, l.Pose.T)
	}
	// A ray that misses the cylinder is reported, not invented.
	if _, _, err := SeenAt(Placement{Shape: Cylinder{R: 5}}, l, 1000, 10); err == nil {
		t.Error("a ray past a 5 mm cylinder: want an error")
	}
}

// TestRenderSurfaceWindow: a windowed render is the full render inside the
// window, pixel for pixel, and the void grey outside; an empty window is
// an error.
func TestRenderSurfaceWindow(t *testing.T) {
	l, _ := BenchRig(160, 120)
	p, err := NewPattern(PatternOptions{Diameter: 4, Seed: 3, Bounds: Rect{X0: -60, Y0: -60, X1: 60, Y1: 60}})
	if err != nil {
		t.Fatal(err)
	}
	pl := Placement{Shape: Cylinder{R: 60}}
	o := RenderOptions{W: 160, H: 120, Supersample: 2, Void: 0.25}
	full, _, err := RenderSurface(p, pl, l, o)
	if err != nil {
		t.Fatal(err)
	}
	win := image.Rect(30, 20, 110, 90)
	part, rep, err := RenderSurfaceWindow(p, pl, l, o, win)
	if err != nil {
		t.Fatal(err)
	}
	void := float32(math.Round(0.25 * 255))
	for y := range 120 {
		for x := range 160 {
			want := void
			if (image.Point{X: x, Y: y}).In(win) {
				want = full.At(x, y)
			}
			if got := part.At(x, y); got != want {
				t.Fatalf("pixel (%d, %d): %g, want %g", x, y, got, want)
			}
		}
	}
	if want := (160*120 - 80*70) * 4; rep.Void != want {
		t.Errorf("void samples %d, want %d", rep.Void, want)
	}
	if _, _, err := RenderSurfaceWindow(p, pl, l, o, image.Rectangle{}); err == nil {
		t.Error("empty window: want an error")
	}
}

package calib

import (
	"context"
	"math"
	"testing"

	"github.com/mottledic/mottle/pkg/synth"
)

// TestDetectExact checks detected positions against the exact projection of
// each target point by synth's camera.
func TestDetectExact(t *testing.T) {
	for _, kind := range []Kind{Checkerboard, Dots} {
		tg := testTarget(t, kind)
		cx, cy := tg.centre()
		poses := testPoses(3, cx, cy)
		imgs := renderSet(t, tg, testLens, poses)
		for k, g := range imgs {
			d, err := Detect(g, tg, DetectOptions{})
			if err != nil {
				t.Fatalf("%s view %d: %v", kind, k, err)
			}
			v := synth.View{Lens: testLens, Pose: poses[k]}
			var s, mx float64
			for _, p := range d.Points {
				x, y, _ := v.Project(p.X, p.Y)
				e := math.Hypot(p.Px-x, p.Py-y)
				s += e * e
				mx = math.Max(mx, e)
			}
			rms := math.Sqrt(s / float64(len(d.Points)))
			t.Logf("%s view %d: %d points, error RMS %.4f px, max %.4f px, tilt %.1f°", kind, k, len(d.Points), rms, mx, d.Tilt)
		}
	}
}

func testTarget(tb testing.TB, kind Kind) *Target {
	tb.Helper()
	var tg *Target
	var err error
	if kind == Checkerboard {
		tg, err = NewTarget(Checkerboard, 9, 7, 20)
	} else {
		tg, err = NewTarget(Dots, 9, 7, 20)
	}
	if err != nil {
		tb.Fatal(err)
	}
	return tg
}

func (t *Target) centre() (float64, float64) {
	if t.Kind == Dots {
		return float64(t.Cols-1) * t.Pitch / 2, float64(t.Rows-1) * t.Pitch / 2
	}
	return float64(t.Cols) * t.Pitch / 2, float64(t.Rows) * t.Pitch / 2
}

func TestCalibrateRendered(t *testing.T) {
	for _, kind := range []Kind{Checkerboard, Dots} {
		tg := testTarget(t, kind)
		cx, cy := tg.centre()
		poses := testPoses(12, cx, cy)
		imgs := renderSet(t, tg, testLens, poses)
		views := detectAll(t, tg, imgs)
		res, err := Calibrate(context.Background(), views, testW, testH, Options{})
		if err != nil {
			t.Fatal(err)
		}
		c := res.Camera
		t.Logf("%s: rms %.4f px, fx %.3f (%.3f) fy %.3f (%.3f) cx %.3f cy %.3f k1 %.5f k2 %.5f k3 %.5f p1 %.6f p2 %.6f; std %v",
			kind, res.RMS, c.Fx, testLens.Fx, c.Fy, testLens.Fy, c.Cx, c.Cy, c.K1, c.K2, c.K3, c.P1, c.P2, res.Std)
	}
}

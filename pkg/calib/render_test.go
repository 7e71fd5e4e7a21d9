package calib

import (
	"fmt"
	"math"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// The truth of the calibration tests: targets rendered by pkg/synth's exact
// camera (its own implementation of the pinhole and Brown–Conrady model),
// each pixel integrated over the target through the inverse camera model.

// testLens is the lens of the rendered calibration sets: about 3.5 % radial
// distortion (14 px) at the image corners, and a little decentring.
var testLens = synth.Lens{Fx: 900, Fy: 905, Cx: 322.5, Cy: 236.8, K1: -0.18, K2: 0.12, P1: 4e-4, P2: -3e-4}

const testW, testH = 640, 480

// testPoses returns n poses of a plane whose point (cx, cy) mm is seen
// near the image centre at about 330–400 mm, tilted 15–35° in varying
// directions and turned about the optical axis.
func testPoses(n int, cx, cy float64) []synth.Pose {
	var ps []synth.Pose
	for k := range n {
		a := 2 * math.Pi * float64(k) / float64(n)
		tilt := (15 + 20*float64(k%3)/2) * math.Pi / 180
		rx, ry := tilt*math.Cos(a), tilt*math.Sin(a)
		rz := 0.3 * math.Sin(1.7*float64(k))
		z := 360 + 30*math.Sin(2.3*float64(k))
		off := [3]float64{12 * math.Cos(1.3*float64(k)), 9 * math.Sin(0.9*float64(k)), z}
		p := synth.PoseFromAngles(rx, ry, rz, [3]float64{})
		for i := range 3 {
			p.T[i] = off[i] - (p.R[i][0]*cx + p.R[i][1]*cy)
		}
		ps = append(ps, p)
	}
	return ps
}

// surfaceOf returns synth's rendering of target t.
func surfaceOf(t *Target) synth.Surface {
	if t.Kind == Checkerboard {
		return synth.Checkerboard{Cols: t.Cols, Rows: t.Rows, Square: t.Pitch, Edge: 0.5,
			Markers: t.Marker[:], MarkerDiameter: t.MarkerDiameter}
	}
	return synth.DotGrid{Cols: t.Cols, Rows: t.Rows, Pitch: t.Pitch, Diameter: t.Dot, Edge: 0.5,
		Big: t.Marker[:], BigDiameter: t.MarkerDiameter}
}

// renderSet renders target t in every pose with noise 1 grey level.
func renderSet(tb testing.TB, t *Target, lens synth.Lens, poses []synth.Pose) []*imageio.Gray {
	tb.Helper()
	var imgs []*imageio.Gray
	for k, p := range poses {
		g, rep, err := synth.RenderView(surfaceOf(t), synth.View{Lens: lens, Pose: p},
			synth.RenderOptions{W: testW, H: testH, Supersample: 2, Blur: 0.6, Noise: 1, Seed: int64(100 + k)})
		if err != nil {
			tb.Fatal(err)
		}
		if rep.Failed > 0 {
			tb.Fatalf("pose %d: %d failed samples", k, rep.Failed)
		}
		imgs = append(imgs, g)
	}
	return imgs
}

func detectAll(tb testing.TB, t *Target, imgs []*imageio.Gray) []View {
	tb.Helper()
	var views []View
	for k, g := range imgs {
		d, err := Detect(g, t, DetectOptions{})
		if err != nil {
			tb.Fatalf("view %d: %v", k, err)
		}
		views = append(views, View{Name: fmt.Sprintf("view%02d", k), Points: d.Points})
	}
	return views
}

// testTime is the fixed creation time of files written by tests.
var testTime = time.Date(2026, 3, 14, 9, 30, 0, 0, time.UTC)

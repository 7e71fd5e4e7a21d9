// Package stereobench is the invented stereo bench of the tests: the two
// cameras of synth.BenchRig, the exact rig they form (the rig file a
// perfect calibration of them would give) and the speckle patterns
// rendered on its specimens, in mm. Tests of pkg/stereo, pkg/series3d,
// the service, the CLI and the browser preview share it instead of each
// building the rig again.
package stereobench

import (
	"bytes"
	"fmt"
	"time"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/synth"
)

// Rig returns the bench's cameras for w×h images and their exact rig: the
// right camera's pose relative to the left, R = Rr·Rlᵀ and T = Tr − R·Tl
// for world-to-camera poses x = R·X + T (the composition of two rigid
// motions, common practice), with each camera's lens as it is.
func Rig(w, h int) (left, right synth.Cam, rig *calib.Rig) {
	left, right = synth.BenchRig(w, h)
	var R [3][3]float64
	for i := range 3 {
		for j := range 3 {
			for k := range 3 {
				R[i][j] += right.Pose.R[i][k] * left.Pose.R[j][k]
			}
		}
	}
	var T [3]float64
	for i := range 3 {
		T[i] = right.Pose.T[i] - (R[i][0]*left.Pose.T[0] + R[i][1]*left.Pose.T[1] + R[i][2]*left.Pose.T[2])
	}
	cam := func(c synth.Lens) calib.Camera {
		return calib.Camera{Fx: c.Fx, Fy: c.Fy, Cx: c.Cx, Cy: c.Cy, K1: c.K1, K2: c.K2, K3: c.K3, P1: c.P1, P2: c.P2}
	}
	return left, right, &calib.Rig{Left: cam(left.Lens), Right: cam(right.Lens), R: R, T: T, W: w, H: h}
}

// RigFile returns the rig file (mottle-rig/1) of Rig(w, h), as mottle
// calibrate --stereo writes it.
func RigFile(w, h int) ([]byte, error) {
	_, _, rig := Rig(w, h)
	res := &calib.StereoResult{Rig: *rig, Rot: calib.PoseFromMatrix(rig.R, rig.T).Rot}
	var b bytes.Buffer
	if err := calib.NewRigFile(res, nil, nil, time.Date(2026, 3, 14, 9, 30, 0, 0, time.UTC)).Write(&b); err != nil {
		return nil, fmt.Errorf("stereobench: rig file: %w", err)
	}
	return b.Bytes(), nil
}

// Scaled is a speckle pattern in mm: the pattern's unit is 0.1 mm, so a
// diameter of 7 makes speckles 0.7 mm across (about 7 px on the bench at
// 1024 px).
type Scaled struct{ P *synth.Pattern }

// Value implements synth.Surface.
func (s Scaled) Value(X, Y float64) float64 { return s.P.Value(10*X, 10*Y) }

// Pattern returns a Scaled speckle pattern of the given speckle diameter
// (in 0.1 mm) and seed, covering 150 × 120 mm around the origin.
func Pattern(diameter float64, seed int64) (Scaled, error) {
	p, err := synth.NewPattern(synth.PatternOptions{Diameter: diameter, Seed: seed, Bounds: synth.Rect{X0: -750, Y0: -600, X1: 750, Y1: 600}})
	if err != nil {
		return Scaled{}, fmt.Errorf("stereobench: pattern: %w", err)
	}
	return Scaled{p}, nil
}

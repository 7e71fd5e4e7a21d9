package verify

import (
	"context"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/mottledic/mottle/internal/figures"
	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/kinematics"
	"github.com/mottledic/mottle/pkg/results"
	"github.com/mottledic/mottle/pkg/synth"
)

// The false-strain test of lens distortion. A rigid in-plane translation has
// zero strain (common practice: a rigid translation changes u but not F),
// but seen through a distorting lens the image displacement varies over the
// image, and 2D DIC reports a false strain that grows toward the corners
// (Sutton et al. 2008, Opt. Lasers Eng. 46:746, discuss this and the
// out-of-plane counterpart). For radial distortion x_d = x(1 + k1 r²) a
// translation of Δ px gives ε ≈ 6 k1 x_n Δ/f at normalised position x_n
// (derived from the model of Brown 1966): with f = 700 px, k1 = −0.06,
// Δ = 6 px and x_n ≈ 0.34 at the corners, about 1e-3.

// fsLens is the lens of the false-strain test.
var fsLens = synth.Lens{Fx: 700, Fy: 702, Cx: 240.3, Cy: 180.6, K1: -0.06, K2: 0.01}

const fsW, fsH = 480, 360

// fsPose returns the pose of a plane whose point (cx, cy) mm is seen at
// (off[0], off[1], off[2]) in the camera frame, rotated by (rx, ry, rz).
func fsPose(rx, ry, rz, cx, cy float64, off [3]float64) synth.Pose {
	p := synth.PoseFromAngles(rx, ry, rz, [3]float64{})
	for i := range 3 {
		p.T[i] = off[i] - (p.R[i][0]*cx + p.R[i][1]*cy)
	}
	return p
}

// fsCalibration renders 12 target views plus one lying in the specimen
// plane (pose spec), calibrates, and returns the file with that plane set.
func fsCalibration(t *testing.T, spec synth.Pose) *calib.File {
	t.Helper()
	tg, err := calib.NewTarget(calib.Checkerboard, 9, 7, 10)
	if err != nil {
		t.Fatal(err)
	}
	surf := synth.Checkerboard{Cols: tg.Cols, Rows: tg.Rows, Square: tg.Pitch, Edge: 0.3, Markers: tg.Marker[:], MarkerDiameter: tg.MarkerDiameter}
	var poses []synth.Pose
	for k := range 12 {
		a := 2 * math.Pi * float64(k) / 12
		tilt := (15 + 10*float64(k%3)) * math.Pi / 180
		poses = append(poses, fsPose(tilt*math.Cos(a), tilt*math.Sin(a), 0.3*math.Sin(1.7*float64(k)), 45, 35,
			[3]float64{8 * math.Cos(1.3*float64(k)), 6 * math.Sin(0.9*float64(k)), 150 + 15*math.Sin(2.3*float64(k))}))
	}
	poses = append(poses, spec)
	var imgs []calib.Image
	for k, p := range poses {
		g, _, err := synth.RenderView(surf, synth.View{Lens: fsLens, Pose: p},
			synth.RenderOptions{W: fsW, H: fsH, Supersample: 2, Blur: 0.6, Noise: 1, Seed: int64(k + 1)})
		if err != nil {
			t.Fatal(err)
		}
		name := fmt.Sprintf("view%02d", k)
		if k == len(poses)-1 {
			name = "plane"
		}
		imgs = append(imgs, calib.Image{Name: name, Gray: g})
	}
	res, rej, err := calib.CalibrateImages(context.Background(), imgs, tg, calib.DetectOptions{}, calib.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if len(rej) > 0 {
		t.Fatalf("rejected views: %v", rej)
	}
	t.Logf("calibration: RMS %.4f px, fx %.3f (true %g), k1 %.5f (true %g)", res.RMS, res.Camera.Fx, fsLens.Fx, res.Camera.K1, fsLens.K1)
	f := calib.NewFile(res, tg, nil, fsTime)
	if err := f.SetPlane("plane"); err != nil {
		t.Fatal(err)
	}
	return f
}

// TestFalseStrainCorrected renders a speckle plane at 150 mm, about 2° off
// square-on, translated rigidly by about (6, −4) px, and checks that the
// strain measured without calibration shows the expected false strain
// (≥ 5e-4 at the corners) and with the calibration applied is at most 5e-5
// everywhere.
func TestFalseStrainCorrected(t *testing.T) {
	spec := fsPose(2*math.Pi/180, -1.5*math.Pi/180, 0.05, 45, 35, [3]float64{0, 0, 150})
	cal := fsCalibration(t, spec)
	m, err := cal.Mapping("camera.json")
	if err != nil {
		t.Fatal(err)
	}
	// Speckle plane: one surface unit is 0.2 mm (≈ 0.93 px here), speckles
	// of 6 units (≈ 5.6 px), lens blur 1.3 px, 16-bit, no noise, and a
	// prefilter of 0.8 px: smooth images keep the interpolation bias of the
	// correlation (Schreier, Braasch & Sutton 2000) well under what the
	// 5e-5 bound allows, so the test sees the calibration, not the bias.
	const unit = 0.2
	po := synth.PatternOptions{Diameter: 6, Seed: 7, Bounds: synth.Rect{X0: (45 - 100) / unit, Y0: (35 - 80) / unit, X1: (45 + 100) / unit, Y1: (35 + 80) / unit}}
	pat, err := synth.NewPattern(po)
	if err != nil {
		t.Fatal(err)
	}
	move := synth.Translation{U: 6.4, V: -4.3}
	ro := synth.RenderOptions{W: fsW, H: fsH, Bits: 16, Blur: 1.3}
	ref, _, err := synth.RenderView(pat, synth.View{Lens: fsLens, Pose: spec, Unit: unit}, ro)
	if err != nil {
		t.Fatal(err)
	}
	def, _, err := synth.RenderView(pat, synth.View{Lens: fsLens, Pose: spec, Unit: unit, Motion: move}, ro)
	if err != nil {
		t.Fatal(err)
	}
	p := analysis.Defaults()
	p.Interpolation = "quintic"
	p.Subset = 41
	p.Prefilter = 0.8
	p.StrainWindow = 11
	out, err := analysis.RunJob(context.Background(), analysis.Job{Ref: ref, Def: def, Params: p})
	if err != nil {
		t.Fatal(err)
	}
	f := out.Field
	raw := maxAbsStrain(t, f)
	// With the calibration, through the pipeline's field builder (the
	// correlation does not depend on it).
	p.Calibration, p.CalibrationName = cal.Compact(), "camera.json"
	if err := p.Validate(fsW, fsH); err != nil {
		t.Fatal(err)
	}
	fc, err := analysis.Kinematics(context.Background(), out.Correlation, p)
	if err != nil {
		t.Fatal(err)
	}
	if fc.Units["u"] != "mm" {
		t.Errorf("calibrated u is in %q, want mm (the file has a specimen plane)", fc.Units["u"])
	}
	if c, ok := fc.Meta.Extra["calibration"].(map[string]any); !ok || c["name"] != "camera.json" {
		t.Errorf("the field does not say which calibration made it: %v", fc.Meta.Extra["calibration"])
	}
	mapped := maxAbsStrain(t, fc)
	writeFalseStrainMaps(t, ref, f, fc)
	// The same with the true lens and plane pose: what a perfect calibration
	// would give, i.e. the correlation's own error.
	p.Calibration = &calib.File{Format: calib.FileFormat, Image: [2]int{fsW, fsH},
		Camera: calib.Params{Fx: fsLens.Fx, Fy: fsLens.Fy, Cx: fsLens.Cx, Cy: fsLens.Cy, K1: fsLens.K1, K2: fsLens.K2},
		Plane:  &calib.Plane{Pose: calib.PoseFromMatrix(spec.R, spec.T)}}
	ft, err := analysis.Kinematics(context.Background(), out.Correlation, p)
	if err != nil {
		t.Fatal(err)
	}
	perfect := maxAbsStrain(t, ft)
	// The test's own chain rule (Mapping.Jacobian, Gradient.Reparam) on the
	// uncorrected field, as a check of the builder's.
	own := mappedStrain(t, f, m)
	t.Logf("largest |strain| over %d points: without calibration %.3g, with calibration %.3g (bound 5e-5), with the true camera %.3g; test's own chain rule %.3g",
		f.Grid.Len(), raw, mapped, perfect, own)
	if math.Abs(own-mapped) > 0.1*mapped {
		t.Errorf("the builder's mapped strain %.3g and the test's own %.3g differ", mapped, own)
	}
	figures.Check(t, "falsestrain/without", raw)
	figures.Check(t, "falsestrain/with", mapped)
	figures.Check(t, "falsestrain/true-lens", perfect)
}

// maxAbsStrain returns the largest |E11|, |E22|, |E12| of a field.
func maxAbsStrain(t *testing.T, f *field.Field) float64 {
	var mx float64
	for _, n := range []string{"E11", "E22", "E12"} {
		q, ok := f.Get(n)
		if !ok {
			t.Fatalf("field has no %s", n)
		}
		for _, v := range q {
			if !math.IsNaN(v) {
				mx = math.Max(mx, math.Abs(v))
			}
		}
	}
	return mx
}

// mappedStrain maps reference and deformed positions of every point
// through m, fits the gradient of the mapped displacement over the image
// grid and turns it into the gradient over mapped positions by the chain
// rule (kinematics.Gradient.Reparam with calib.Mapping.Jacobian); it
// returns the largest Green–Lagrange component.
func mappedStrain(t *testing.T, f *field.Field, m *calib.Mapping) float64 {
	u, _ := f.Get("u")
	v, _ := f.Get("v")
	n := f.Grid.Len()
	U, V := make([]float64, n), make([]float64, n)
	J := make([][2][2]float64, n)
	for k := range n {
		x, y := f.Grid.X[k], f.Grid.Y[k]
		if math.IsNaN(u[k]) {
			U[k], V[k] = math.NaN(), math.NaN()
			continue
		}
		X, Y, jac, err := m.Jacobian(x, y)
		if err != nil {
			t.Fatal(err)
		}
		x2, y2, err := m.Map(x+u[k], y+v[k])
		if err != nil {
			t.Fatal(err)
		}
		U[k], V[k], J[k] = x2-X, y2-Y, jac
	}
	g := kinematics.Grid{X0: f.Grid.X[0], Y0: f.Grid.Y[0], Step: float64(f.Grid.Step), Nx: f.Grid.Nx, Ny: f.Grid.Ny}
	grads, err := kinematics.Gradients(context.Background(), g, U, V, nil, nil, kinematics.GradientOptions{Window: 11, Fit: kinematics.Plane})
	if err != nil {
		t.Fatal(err)
	}
	var mx float64
	for k, gr := range grads {
		r := gr.Reparam(J[k])
		if r.Status != kinematics.GradOK {
			continue
		}
		E := kinematics.Compute(r.F(), kinematics.GreenLagrangeMeasure).E
		mx = math.Max(mx, math.Max(math.Abs(E[0][0]), math.Max(math.Abs(E[1][1]), math.Abs(E[0][1]))))
	}
	return mx
}

// fsTime is the fixed creation time of the test's calibration file.
var fsTime = time.Date(2026, 3, 14, 9, 30, 0, 0, time.UTC)

// writeFalseStrainMaps writes the E11 maps without and with the
// calibration, on one colour range, to $MOTTLE_ARTIFACTS/falsestrain when
// that is set (the README shows them).
func writeFalseStrainMaps(t *testing.T, ref *imageio.Gray, raw, cal *field.Field) {
	dir := os.Getenv("MOTTLE_ARTIFACTS")
	if dir == "" {
		return
	}
	dir = filepath.Join(dir, "falsestrain")
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	for _, m := range []struct {
		name, title string
		f           *field.Field
	}{
		{"E11-without-calibration.png", "E11 of a rigid translation, without calibration", raw},
		{"E11-with-calibration.png", "E11 of the same translation, with the calibration", cal},
	} {
		b, err := results.RenderMap(m.f, ref, results.MapRequest{Quantity: "E11", Range: [2]float64{-1.2e-3, 1.2e-3}, Title: m.title})
		if err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(filepath.Join(dir, m.name), b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
}

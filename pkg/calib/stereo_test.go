package calib

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"

	"github.com/mottledic/mottle/internal/figures"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// The truth of the rig tests: a checkerboard rendered by pkg/synth through
// both exact cameras of the invented bench (synth.BenchRig: 500 mm, 25°
// between the axes, about 100 mm across the image), at 640×480 px.

const rigW, rigH = 640, 480

// rigOptions hold k3 at zero: with a field of ±5.7° the r⁶ term moves an
// image point by less than 1e-3 px and is not determined (common practice
// for long lenses).
var rigOptions = Options{FixK3: true}

type rigSet struct {
	t     *Target
	left  []*imageio.Gray
	right []*imageio.Gray
	views []StereoView
}

var (
	rigOnce sync.Once
	rigData *rigSet
)

// rigPoses returns n poses of the target centred near the world origin,
// tilted 12–30° in varying directions and turned about its normal.
func rigPoses(n int, cx, cy float64) []synth.Pose {
	var ps []synth.Pose
	for k := range n {
		a := 2*math.Pi*float64(k)/float64(n) + 0.4
		tilt := (12 + 18*float64(k%3)/2) * math.Pi / 180
		p := synth.PoseFromAngles(tilt*math.Cos(a), tilt*math.Sin(a), 0.25*math.Sin(1.7*float64(k)), [3]float64{})
		// A printed sheet is read with its y axis down and its ink facing
		// −z of its own frame; the bench looks at +z, so turn the sheet
		// over about its x axis.
		for i := range 3 {
			p.R[i][1], p.R[i][2] = -p.R[i][1], -p.R[i][2]
		}
		off := [3]float64{3 * math.Cos(1.3*float64(k)), 2 * math.Sin(0.9*float64(k)), 15 * math.Sin(2.3*float64(k))}
		for i := range 3 {
			p.T[i] = off[i] - (p.R[i][0]*cx + p.R[i][1]*cy)
		}
		ps = append(ps, p)
	}
	return ps
}

func renderRigSet(tb testing.TB) *rigSet {
	tb.Helper()
	rigOnce.Do(func() {
		tg, err := NewTarget(Checkerboard, 9, 7, 7)
		if err != nil {
			tb.Fatal(err)
		}
		cx, cy := tg.centre()
		lc, rc := synth.BenchRig(rigW, rigH)
		s := &rigSet{t: tg}
		for k, p := range rigPoses(10, cx, cy) {
			pl := synth.Placement{Shape: synth.Plane{}, Pose: p}
			var pts [2][]Observation
			for side, c := range []synth.Cam{lc, rc} {
				g, rep, err := synth.RenderSurface(surfaceOf(tg), pl, c,
					synth.RenderOptions{W: rigW, H: rigH, Supersample: 2, Blur: 0.6, Noise: 1, Seed: int64(200 + 2*k + side)})
				if err != nil || rep.Failed > 0 {
					tb.Fatalf("pose %d side %d: %v (%d failed samples)", k, side, err, rep.Failed)
				}
				d, err := Detect(g, tg, DetectOptions{})
				if err != nil {
					tb.Fatalf("pose %d side %d: %v", k, side, err)
				}
				pts[side] = d.Points
				if side == 0 {
					s.left = append(s.left, g)
				} else {
					s.right = append(s.right, g)
				}
			}
			s.views = append(s.views, commonPoints(fmt.Sprintf("pair%02d", k), pts[0], pts[1]))
		}
		rigData = s
	})
	if rigData == nil {
		tb.Fatal("rendered rig set failed")
	}
	return rigData
}

// commonPoints keeps the target points seen in both images, in one order.
func commonPoints(name string, l, r []Observation) StereoView {
	idx := map[[2]int]Observation{}
	for _, q := range r {
		idx[[2]int{q.I, q.J}] = q
	}
	v := StereoView{Name: name}
	for _, q := range l {
		if p, ok := idx[[2]int{q.I, q.J}]; ok {
			v.Left = append(v.Left, q)
			v.Right = append(v.Right, p)
		}
	}
	return v
}

func benchRig() Rig {
	lc, rc := synth.BenchRig(rigW, rigH)
	cam := func(l synth.Lens) Camera {
		return Camera{Fx: l.Fx, Fy: l.Fy, Cx: l.Cx, Cy: l.Cy, K1: l.K1, K2: l.K2, K3: l.K3, P1: l.P1, P2: l.P2}
	}
	R := mul3(rc.Pose.R, transpose3(lc.Pose.R))
	var T [3]float64
	for i := range 3 {
		T[i] = rc.Pose.T[i] - (R[i][0]*lc.Pose.T[0] + R[i][1]*lc.Pose.T[1] + R[i][2]*lc.Pose.T[2])
	}
	return Rig{Left: cam(lc.Lens), Right: cam(rc.Lens), R: R, T: T, W: rigW, H: rigH}
}

// TestStereoCalibrateTruth fits the rig to the rendered pairs and compares
// it with the bench's true cameras and pose: each parameter within 4 of its
// stated standard deviations (the errors of a least-squares fit are
// Gaussian with that std; Hartley & Zisserman 2003, §5.2), and the
// baseline (500·2·sin 12.5° = 216.4 mm) and the angle (25°) from them.
func TestStereoCalibrateTruth(t *testing.T) {
	s := renderRigSet(t)
	res, err := CalibrateStereo(context.Background(), s.views, rigW, rigH, rigOptions)
	if err != nil {
		t.Fatal(err)
	}
	tr := benchRig()
	t.Logf("RMS left %.4f px, right %.4f px; baseline %.3f mm (true %.3f), angle %.4f° (true %.4f)",
		res.RMSLeft, res.RMSRight, res.Rig.Baseline(), tr.Baseline(), res.Rig.Angle(), tr.Angle())
	figures.Check(t, "stereo/calib/rms", math.Max(res.RMSLeft, res.RMSRight))
	figures.Check(t, "stereo/calib/baseline", 100*math.Abs(res.Rig.Baseline()-tr.Baseline())/tr.Baseline())
	figures.Check(t, "stereo/calib/angle", math.Abs(res.Rig.Angle()-tr.Angle()))
	if res.RMSLeft > 0.1 || res.RMSRight > 0.1 {
		t.Errorf("RMS %.4f / %.4f px: want below 0.1 px on noise-1 renderings", res.RMSLeft, res.RMSRight)
	}
	got := rigVector(&res.Rig)
	want := rigVector(&tr)
	for i, n := range RigParamNames() {
		d := math.Abs(got[i] - want[i])
		if res.Std[i] == 0 {
			continue // fixed
		}
		if d > 4*res.Std[i] {
			t.Errorf("%s: fit %.8g ± %.3g, truth %.8g: off by %.1f std", n, got[i], res.Std[i], want[i], d/res.Std[i])
		}
	}
	if d := math.Abs(res.Rig.Angle() - 25); d > 0.05 {
		t.Errorf("angle between the axes %.4f°: want 25° within 0.05°", res.Rig.Angle())
	}
	if d := math.Abs(res.Rig.Baseline() - tr.Baseline()); d > 0.005*tr.Baseline() {
		t.Errorf("baseline %.3f mm: want %.3f mm within 0.5 %%", res.Rig.Baseline(), tr.Baseline())
	}
}

func rigVector(r *Rig) [nRig]float64 {
	var v [nRig]float64
	l, rr := r.Left.vector(), r.Right.vector()
	copy(v[:], l[:])
	copy(v[nIntr:], rr[:])
	w := rotvec(r.R)
	copy(v[2*nIntr:], w[:])
	copy(v[2*nIntr+3:], r.T[:])
	return v
}

// TestStereoOpenCV cross-checks the rig fit against OpenCV 4.6 (Debian's
// python3-opencv): cv2.stereoCalibrate (CALIB_USE_INTRINSIC_GUESS, after
// cv2.calibrateCamera per camera) on the same detected corners must give
// both cameras' intrinsics, the rotation and the translation within our
// stated standard deviation of each.
func TestStereoOpenCV(t *testing.T) {
	s := renderRigSet(t)
	res, err := CalibrateStereo(context.Background(), s.views, rigW, rigH, rigOptions)
	if err != nil {
		t.Fatal(err)
	}
	type view struct {
		Object [][2]float64 `json:"object"`
		Left   [][2]float64 `json:"left"`
		Right  [][2]float64 `json:"right"`
	}
	var req struct {
		Calibrate struct {
			Size  [2]int `json:"image_size"`
			Views []view `json:"views"`
			FixK3 bool   `json:"fix_k3"`
		} `json:"calibrate"`
	}
	req.Calibrate.Size = [2]int{rigW, rigH}
	req.Calibrate.FixK3 = true
	for _, v := range s.views {
		var vw view
		for k, p := range v.Left {
			vw.Object = append(vw.Object, [2]float64{p.X, p.Y})
			vw.Left = append(vw.Left, [2]float64{p.Px, p.Py})
			vw.Right = append(vw.Right, [2]float64{v.Right[k].Px, v.Right[k].Py})
		}
		req.Calibrate.Views = append(req.Calibrate.Views, vw)
	}
	var cv struct {
		Version   string
		Calibrate struct {
			RMS         float64
			Left, Right Params
			R           [3][3]float64
			T           [3]float64
		}
	}
	runRef(t, "ref_stereo.py", req, &cv)
	c := cv.Calibrate
	cvRig := Rig{Left: c.Left.Camera(), Right: c.Right.Camera(), R: c.R, T: c.T}
	t.Logf("OpenCV %s: RMS %.5f px (ours %.5f)", cv.Version, c.RMS, res.RMS)
	ours, theirs := rigVector(&res.Rig), rigVector(&cvRig)
	var worst float64
	for i, n := range RigParamNames() {
		d := math.Abs(ours[i] - theirs[i])
		if res.Std[i] == 0 {
			continue // fixed
		}
		worst = math.Max(worst, d/res.Std[i])
		t.Logf("%s: ours %.8g ± %.3g, OpenCV %.8g, difference %.2f std", n, ours[i], res.Std[i], theirs[i], d/res.Std[i])
		if d > res.Std[i] {
			t.Errorf("%s: ours %.8g and OpenCV's %.8g differ by %.3g, more than our standard deviation %.3g", n, ours[i], theirs[i], d, res.Std[i])
		}
	}
	figures.Check(t, "stereo/calib/opencv/params-in-std", worst)
}

// runRef runs a reference driver of scripts/ with the request req and
// decodes its answer into out.
func runRef(t *testing.T, script string, req, out any) {
	t.Helper()
	body, _ := json.Marshal(req)
	f := filepath.Join(t.TempDir(), "req.json")
	if err := os.WriteFile(f, body, 0o644); err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(python, filepath.Join(scriptsDir(t), script), f)
	var o, e bytes.Buffer
	cmd.Stdout, cmd.Stderr = &o, &e
	if err := cmd.Run(); err != nil {
		t.Fatalf("%s %s: %v: %s (install the Debian package python3-opencv)", python, script, err, e.String())
	}
	if err := json.Unmarshal(o.Bytes(), out); err != nil {
		t.Fatal(err)
	}
}

// TestStereoImagesAndFile runs the image front end (detection of every
// pair) and writes, reads and checks the rig file, and covers bad input.
func TestStereoImagesAndFile(t *testing.T) {
	s := renderRigSet(t)
	var l, r []Image
	for k := range s.left {
		l = append(l, Image{Name: fmt.Sprintf("L%02d.png", k), Gray: s.left[k]})
		r = append(r, Image{Name: fmt.Sprintf("R%02d.png", k), Gray: s.right[k]})
	}
	res, rej, err := CalibrateStereoImages(context.Background(), l, r, s.t, DetectOptions{}, rigOptions)
	if err != nil {
		t.Fatal(err)
	}
	if len(rej) != 0 || len(res.Views) != len(l) {
		t.Fatalf("%d rejected, %d views", len(rej), len(res.Views))
	}
	var b bytes.Buffer
	if err := NewRigFile(res, s.t, rej, testTime).Write(&b); err != nil {
		t.Fatal(err)
	}
	f, err := ParseRig(b.Bytes())
	if err != nil {
		t.Fatal(err)
	}
	rig := f.Rig()
	if d := math.Abs(rig.Baseline() - res.Rig.Baseline()); d > 1e-9 || f.Image != [2]int{rigW, rigH} {
		t.Errorf("rig file round trip: baseline %g vs %g, size %v", rig.Baseline(), res.Rig.Baseline(), f.Image)
	}
	if err := rig.Check(rigW, rigH, rigW, rigH); err != nil {
		t.Error(err)
	}
	bad := []struct {
		name string
		err  error
		want string
	}{
		{"sizes differ", rig.Check(rigW, rigH, rigW/2, rigH/2), "same size"},
		{"other size", rig.Check(1024, 768, 1024, 768), "calibrated on 640×480"},
		{"counts", third(CalibrateStereoImages(context.Background(), l, r[:3], s.t, DetectOptions{}, rigOptions)), "one right image for every left"},
		{"image size", third(CalibrateStereoImages(context.Background(), l[:1], []Image{{Name: "small.png", Gray: imageio.NewGray(10, 10)}}, s.t, DetectOptions{}, rigOptions)), "small.png"},
		{"camera file", second(ParseRig([]byte(`{"format":"mottle-camera/1"}`))), "one-camera calibration"},
		{"not json", second(ParseRig([]byte(`{`))), "not a rig file"},
		{"blank pairs", third(CalibrateStereoImages(context.Background(), []Image{{Name: "a", Gray: imageio.NewGray(rigW, rigH)}}, []Image{{Name: "b", Gray: imageio.NewGray(rigW, rigH)}}, s.t, DetectOptions{}, rigOptions)), "0 of 1 pairs"},
	}
	for _, c := range bad {
		if c.err == nil || !strings.Contains(c.err.Error(), c.want) {
			t.Errorf("%s: error %v, want one containing %q", c.name, c.err, c.want)
		}
	}
}

func second[T any](_ T, err error) error { return err }

func third[T, U any](_ T, _ U, err error) error { return err }

package calib

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"testing"
	"time"

	"github.com/mottledic/mottle/internal/figures"
)

// python is Debian's interpreter, which sees python3-opencv (another
// python3 may come first on PATH).
const python = "/usr/bin/python3"

// scriptsDir finds scripts/ref_calib.py above the working directory.
func scriptsDir(t *testing.T) string {
	t.Helper()
	d, _ := filepath.Abs(".")
	for {
		s := filepath.Join(d, "scripts")
		if _, err := os.Stat(filepath.Join(s, "ref_calib.py")); err == nil {
			return s
		}
		if filepath.Dir(d) == d {
			t.Fatal("scripts/ref_calib.py not found above the working directory")
		}
		d = filepath.Dir(d)
	}
}

type cvResponse struct {
	Library, Version string
	RMS              float64 `json:"rms"`
	Seconds          float64 `json:"seconds"`
	Camera, Std      Params
	Given            [][2]float64 `json:"undistorted_given"`
	Fit              [][2]float64 `json:"undistorted_fit"`
}

// TestOpenCV cross-checks the fit against OpenCV 4.6 (Debian's
// python3-opencv): cv2.calibrateCameraExtended on the same detected
// checkerboard corners must give intrinsics within the stated standard
// deviations, and cv2.undistortPointsIter must agree with Undistort, both
// with our parameters (the same function, to 1e-6 px) and with each fit's
// own parameters (within the uncertainty propagated from our covariance).
func TestOpenCV(t *testing.T) {
	s := testSet(t, Checkerboard)
	start := time.Now()
	res, err := Calibrate(context.Background(), s.views, testW, testH, Options{})
	if err != nil {
		t.Fatal(err)
	}
	ours := time.Since(start).Seconds()
	type view struct {
		Object [][2]float64 `json:"object"`
		Image  [][2]float64 `json:"image"`
	}
	req := struct {
		Size      [2]int `json:"image_size"`
		Views     []view `json:"views"`
		Undistort struct {
			Camera Params       `json:"camera"`
			Points [][2]float64 `json:"points"`
		} `json:"undistort"`
	}{Size: [2]int{testW, testH}}
	for _, v := range s.views {
		var vw view
		for _, p := range v.Points {
			vw.Object = append(vw.Object, [2]float64{p.X, p.Y})
			vw.Image = append(vw.Image, [2]float64{p.Px, p.Py})
		}
		req.Views = append(req.Views, vw)
	}
	req.Undistort.Camera = paramsOf(res.Camera)
	for y := 0.0; y <= testH-1; y += 479.0 / 6 {
		for x := 0.0; x <= testW-1; x += 639.0 / 8 {
			req.Undistort.Points = append(req.Undistort.Points, [2]float64{x, y})
		}
	}
	body, _ := json.Marshal(req)
	f := filepath.Join(t.TempDir(), "req.json")
	if err := os.WriteFile(f, body, 0o644); err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(python, filepath.Join(scriptsDir(t), "ref_calib.py"), f)
	var out, stderr bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &stderr
	if err := cmd.Run(); err != nil {
		t.Fatalf("%s ref_calib.py: %v: %s (install the Debian package python3-opencv)", python, err, stderr.String())
	}
	var cv cvResponse
	if err := json.Unmarshal(out.Bytes(), &cv); err != nil {
		t.Fatal(err)
	}
	// Timing is reported, never asserted: the fit's wall time over
	// OpenCV's on the same points, in the same run.
	t.Logf("OpenCV %s: RMS %.5f px (ours %.5f); fit time ours %.3f s, OpenCV %.3f s, ratio %.2f", cv.Version, cv.RMS, res.RMS, ours, cv.Seconds, ours/cv.Seconds)
	names := ParamNames()
	ov := res.Camera.vector()
	cvv := cv.Camera.Camera().vector()
	cvs := cv.Std.Camera().vector()
	var worst float64
	for i, n := range names {
		d := math.Abs(ov[i] - cvv[i])
		worst = math.Max(worst, d/res.Std[i])
		t.Logf("%s: ours %.8g ± %.3g, OpenCV %.8g ± %.3g, difference %.3g", n, ov[i], res.Std[i], cvv[i], cvs[i], d)
		if d > res.Std[i] || d > cvs[i] {
			t.Errorf("%s: ours %.8g and OpenCV's %.8g differ by %.3g, more than the standard deviations %.3g (ours), %.3g (OpenCV)",
				n, ov[i], cvv[i], d, res.Std[i], cvs[i])
		}
	}
	if math.Abs(cv.RMS-res.RMS) > 1e-3 {
		t.Errorf("RMS: OpenCV %.5f, ours %.5f", cv.RMS, res.RMS)
	}
	var maxSame, maxFit, maxRatio float64
	for k, p := range req.Undistort.Points {
		x, y, err := res.Camera.UndistortPixel(p[0], p[1])
		if err != nil {
			t.Fatal(err)
		}
		g := cv.Given[k]
		maxSame = math.Max(maxSame, math.Hypot(x-g[0], y-g[1]))
		sx, sy := undistortStd(res, p[0], p[1])
		fx, fy := cv.Fit[k][0], cv.Fit[k][1]
		maxFit = math.Max(maxFit, math.Hypot(x-fx, y-fy))
		maxRatio = math.Max(maxRatio, math.Max(math.Abs(x-fx)/sx, math.Abs(y-fy)/sy))
	}
	t.Logf("undistorted points: same camera max difference %.2e px; each fit's own camera max %.4f px, at most %.2f of its standard deviation", maxSame, maxFit, maxRatio)
	figures.Check(t, "calib/opencv/params-in-std", worst)
	figures.Check(t, "calib/opencv/undistort", maxSame)
	if maxRatio > 1 {
		t.Errorf("undistorted points of the two fits differ by up to %.2f standard deviations", maxRatio)
	}
}

// undistortStd propagates the parameter covariance to the undistorted
// pixel at (x, y): J C Jᵀ with J by central differences.
func undistortStd(r *Result, x, y float64) (float64, float64) {
	v := r.Camera.vector()
	var J [2][nIntr]float64
	for i := range nIntr {
		h := 1e-6 * math.Max(math.Abs(v[i]), 0.01)
		q := v
		q[i] += h
		xp, yp, _ := cameraFrom(q[:]).UndistortPixel(x, y)
		q[i] -= 2 * h
		xm, ym, _ := cameraFrom(q[:]).UndistortPixel(x, y)
		J[0][i], J[1][i] = (xp-xm)/(2*h), (yp-ym)/(2*h)
	}
	var s [2]float64
	for c := range 2 {
		for i := range nIntr {
			for j := range nIntr {
				s[c] += J[c][i] * r.Cov[i][j] * J[c][j]
			}
		}
	}
	return math.Sqrt(s[0]), math.Sqrt(s[1])
}

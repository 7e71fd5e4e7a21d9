package service_test

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/synth"
)

// calibrationParts renders n views of a 9×7 checkerboard through synth's
// exact camera (lens k1 = −0.1) at 320×240 and returns the target and image
// parts.
func calibrationParts(t *testing.T, n int) ([]part, synth.Lens) {
	t.Helper()
	tg, err := calib.NewTarget(calib.Checkerboard, 9, 7, 10)
	if err != nil {
		t.Fatal(err)
	}
	var tb bytes.Buffer
	if err := tg.Write(&tb); err != nil {
		t.Fatal(err)
	}
	parts := []part{{"target", "board.json", "application/json", tb.Bytes()}}
	lens := synth.Lens{Fx: 420, Fy: 421, Cx: 161, Cy: 119.5, K1: -0.1}
	surf := synth.Checkerboard{Cols: 9, Rows: 7, Square: 10, Edge: 0.4, Markers: tg.Marker[:], MarkerDiameter: tg.MarkerDiameter}
	for k := range n {
		a := 2 * math.Pi * float64(k) / float64(n)
		tilt := (18 + 8*float64(k%2)) * math.Pi / 180
		p := synth.PoseFromAngles(tilt*math.Cos(a), tilt*math.Sin(a), 0.2*math.Sin(float64(k)), [3]float64{})
		for i := range 3 {
			p.T[i] = []float64{0, 0, 190}[i] - (p.R[i][0]*45 + p.R[i][1]*35)
		}
		g, _, err := synth.RenderView(surf, synth.View{Lens: lens, Pose: p}, synth.RenderOptions{W: 320, H: 240, Supersample: 2, Blur: 0.6, Noise: 1, Seed: int64(k)})
		if err != nil {
			t.Fatal(err)
		}
		var b bytes.Buffer
		if err := imageio.WritePNG(&b, g, 8); err != nil {
			t.Fatal(err)
		}
		parts = append(parts, part{"image", fmt.Sprintf("cal%d.png", k), "image/png", b.Bytes()})
	}
	return parts, lens
}

// TestCalibrationRoute: POST /v1/calibrations calibrates from target images
// and returns the calibration file; bad input gets problem documents that
// name the part and what would work.
func TestCalibrationRoute(t *testing.T) {
	ts := newServer(t, nil)
	parts, lens := calibrationParts(t, 8)
	opts := part{"options", "", "application/json", []byte(`{"plane": "cal3.png", "fix_k3": true}`)}
	ct, body := multipartBody(t, append(parts, opts)...)
	resp, b := ts.do(t, "POST", "/v1/calibrations", ct, body)
	if resp.StatusCode != 200 {
		t.Fatalf("status %d: %s", resp.StatusCode, b)
	}
	f, err := calib.Parse(b)
	if err != nil {
		t.Fatal(err)
	}
	if len(f.Views) != 8 || f.Plane == nil || f.Plane.Image != "cal3.png" || f.Image != [2]int{320, 240} {
		t.Errorf("views %d, plane %v, size %v", len(f.Views), f.Plane, f.Image)
	}
	// Loose bounds for 8 small views (the accuracy bounds are tested in
	// pkg/calib): within 4 standard deviations as reported.
	if math.Abs(f.Camera.Fx-lens.Fx) > 4*f.Std.Fx || math.Abs(f.Camera.K1-lens.K1) > 4*f.Std.K1 {
		t.Errorf("fx %.3f ± %.3f (true %g), k1 %.4f ± %.4f (true %g)", f.Camera.Fx, f.Std.Fx, lens.Fx, f.Camera.K1, f.Std.K1, lens.K1)
	}
	// The file sent back is checked and returned.
	ct2, body2 := multipartBody(t, part{"calibration", "camera.json", "application/json", b})
	if resp, b2 := ts.do(t, "POST", "/v1/calibrations", ct2, body2); resp.StatusCode != 200 || !strings.Contains(string(b2), `"mottle-camera/1"`) {
		t.Errorf("calibration part: %d %s", resp.StatusCode, b2)
	}

	small := imageio.NewGray(200, 150)
	var sb bytes.Buffer
	imageio.WritePNG(&sb, small, 8)
	cases := []struct {
		name   string
		parts  []part
		status int
		want   []string
	}{
		{"sizes", append(parts[:3:3], part{"image", "small.png", "image/png", sb.Bytes()}), 422, []string{"small.png is 200×150 px", "same camera"}},
		{"too few", parts[:3], 422, []string{"2 of 2 images usable", "at least 3"}},
		{"no target", parts[1:4], 400, []string{"target", "mottle target"}},
		{"bad target", append([]part{{"target", "t.json", "application/json", []byte(`{"format":"mottle-target/1","kind":"hexagons"}`)}}, parts[1:4]...), 422, []string{"checkerboard"}},
		{"bad file", []part{{"calibration", "c.json", "application/json", []byte(`{"format":"x"}`)}}, 422, []string{"mottle-camera/1"}},
		{"bad options", append(parts[:4:4], part{"options", "", "application/json", []byte(`{"plain": "x"}`)}), 400, []string{"plain"}},
		{"unknown plane", append(parts[:5:5], part{"options", "", "application/json", []byte(`{"plane": "nope.png"}`)}), 422, []string{"nope.png"}},
	}
	for _, c := range cases {
		ct, body := multipartBody(t, c.parts...)
		resp, b := ts.do(t, "POST", "/v1/calibrations", ct, body)
		if resp.StatusCode != c.status || resp.Header.Get("Content-Type") != "application/problem+json" {
			t.Errorf("%s: status %d (%s), want %d: %s", c.name, resp.StatusCode, resp.Header.Get("Content-Type"), c.status, b)
			continue
		}
		for _, w := range c.want {
			if !strings.Contains(string(b), w) {
				t.Errorf("%s: problem %s does not say %q", c.name, b, w)
			}
		}
	}
	if resp, _ := ts.do(t, "POST", "/v1/calibrations", "application/json", []byte("{}")); resp.StatusCode != 415 {
		t.Errorf("JSON body: status %d, want 415", resp.StatusCode)
	}
}

// planeCalibration returns a calibration file of a distortion-free camera
// (f = 500 px) square-on to a plane 100 mm away, for w×h images: one pixel
// is exactly 0.2 mm in the plane (pinhole projection, Zhang 2000 eq. 1).
func planeCalibration(t *testing.T, w, h int) []byte {
	t.Helper()
	f := &calib.File{Format: calib.FileFormat, Image: [2]int{w, h},
		Camera: calib.Params{Fx: 500, Fy: 500, Cx: float64(w-1) / 2, Cy: float64(h-1) / 2},
		Plane:  &calib.Plane{Image: "plane.png", Pose: calib.Pose{T: [3]float64{-10, -10, 100}}}}
	var b bytes.Buffer
	if err := f.Write(&b); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// TestAnalysisWithCalibration: an analysis with a calibration part gives
// displacements in mm in the specimen plane (0.2 mm per px for this
// camera), says which calibration it used, and refuses a calibration of
// another image size or one given with a scale.
func TestAnalysisWithCalibration(t *testing.T) {
	ts := newServer(t, func(c *service.Config) { c.Analyzer, c.Workers = service.Pipeline{}, 2 })
	const u, v = 1.3, -0.6
	ref, def := realPair(t, 128, u, v)
	cal := part{"calibration", "bench-camera.json", "application/json", planeCalibration(t, 128, 128)}
	ct, body := multipartBody(t, append(analysisParts(ref, def, `{"subset": 21, "step": 12}`), cal)...)
	resp, b := ts.do(t, "POST", "/v1/analyses?wait=true", ct, body)
	if resp.StatusCode != 200 {
		t.Fatalf("POST: %d %s", resp.StatusCode, b)
	}
	j := decodeJSON[jobDoc](t, b)
	if j.Summary == nil {
		t.Fatalf("no summary: %s", b)
	}
	if du, dv := j.Summary.Mean["u"]-0.2*u, j.Summary.Mean["v"]-0.2*v; math.Abs(du) > 0.004 || math.Abs(dv) > 0.004 {
		t.Errorf("mean u, v = %.5f, %.5f mm; want %.3f, %.3f (0.2 mm per px)", j.Summary.Mean["u"], j.Summary.Mean["v"], 0.2*u, 0.2*v)
	}
	var fld struct {
		Units map[string]string `json:"units"`
		Meta  struct {
			Extra map[string]any `json:"extra"`
		} `json:"meta"`
	}
	if resp, fb := ts.do(t, "GET", "/v1/analyses/"+j.ID+"/field.json", "", nil); resp.StatusCode != 200 || json.Unmarshal(fb, &fld) != nil {
		t.Fatalf("field.json: %d", resp.StatusCode)
	}
	if fld.Units["u"] != "mm" {
		t.Errorf("u unit %q, want mm", fld.Units["u"])
	}
	if c, ok := fld.Meta.Extra["calibration"].(map[string]any); !ok || c["name"] != "bench-camera.json" {
		t.Errorf("field metadata does not name the calibration: %v", fld.Meta.Extra["calibration"])
	}
	for _, c := range []struct {
		name   string
		parts  []part
		status int
		want   string
	}{
		{"other size", append(analysisParts(ref, def, ""), part{"calibration", "c.json", "application/json", planeCalibration(t, 640, 480)}), 422, "640×480"},
		{"with a scale", append(analysisParts(ref, def, `{"mm_per_px": 0.1}`), cal), 422, "mm_per_px"},
		{"not a calibration", append(analysisParts(ref, def, ""), part{"calibration", "c.json", "application/json", []byte(`{"format":"x"}`)}), 422, "mottle-camera/1"},
	} {
		ct, body := multipartBody(t, c.parts...)
		resp, b := ts.do(t, "POST", "/v1/analyses", ct, body)
		if resp.StatusCode != c.status || !strings.Contains(string(b), c.want) || !strings.Contains(string(b), "calibration") {
			t.Errorf("%s: %d %s; want %d naming the calibration and %q", c.name, resp.StatusCode, b, c.status, c.want)
		}
	}
}

package service_test

import (
	"bytes"
	"encoding/json"
	"fmt"
	"strings"
	"testing"

	"github.com/mottledic/mottle/internal/stereobench"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/synth"
)

// tenthMM is a speckle pattern in mm (stereobench.Scaled).
type tenthMM = stereobench.Scaled

// stereoRig returns the rig file of the exact bench of synth.BenchRig(w, h).
func stereoRig(t *testing.T, w, h int) []byte {
	t.Helper()
	b, err := stereobench.RigFile(w, h)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// stereoPair renders the plane at placement pl in both cameras as PNG parts
// named ln and rn.
func stereoPair(t *testing.T, w, h int, pl synth.Placement, seed int64, ln, rn string) []part {
	t.Helper()
	p, err := synth.NewPattern(synth.PatternOptions{Diameter: 11, Seed: 4, Bounds: synth.Rect{X0: -750, Y0: -600, X1: 750, Y1: 600}})
	if err != nil {
		t.Fatal(err)
	}
	lc, rc := synth.BenchRig(w, h)
	var out []part
	for k, c := range []synth.Cam{lc, rc} {
		g, _, err := synth.RenderSurface(tenthMM{P: p}, pl, c, synth.RenderOptions{W: w, H: h, Supersample: 2, Noise: 0.5, Seed: seed + int64(k)})
		if err != nil {
			t.Fatal(err)
		}
		var b bytes.Buffer
		if err := imageio.WritePNG(&b, g, 8); err != nil {
			t.Fatal(err)
		}
		out = append(out, part{[]string{ln, rn}[k], fmt.Sprintf("%s%d.png", []string{"L", "R"}[k], seed), "image/png", b.Bytes()})
	}
	return out
}

// TestStereoRoutes: bad input to POST /v1/stereo (a stored job, see
// TestStereoJob) and to POST /v1/stereo/series (a stored series, see
// TestStereoSeriesStored) gets problem documents naming the part and
// creates nothing: left and right of different sizes, a rig for other
// images, frames not in pairs, bad params.
func TestStereoRoutes(t *testing.T) {
	const w, h = 320, 240
	ts := newServer(t, nil)
	rig := part{"rig", "rig.json", "application/json", stereoRig(t, w, h)}
	flat := synth.Placement{Shape: synth.Plane{}}
	ref := stereoPair(t, w, h, flat, 0, "left_reference", "right_reference")
	def := stereoPair(t, w, h, synth.Placement{Shape: synth.Plane{}, Pose: synth.Pose{T: [3]float64{0, 0, 1}}}, 2, "left_deformed", "right_deformed")
	// Pairs of a series.
	var sp []part
	for k, ea := range []float64{0, 0.003, 0.006} {
		pl := synth.Placement{Shape: synth.Plane{}, Motion: synth.Affine{F: [2][2]float64{{1 + ea, 0}, {0, 1}}}}
		sp = append(sp, stereoPair(t, w, h, pl, int64(10+2*k), "left", "right")...)
	}
	// Bad input.
	small := stereoPair(t, 240, 180, flat, 0, "left_reference", "right_reference")
	bad := []struct {
		name  string
		path  string
		parts []part
		code  int
		want  string
		field string
	}{
		{"sizes differ", "/v1/stereo", []part{rig, ref[0], small[1]}, 422, "pair-size-mismatch", "right_reference"},
		{"rig for other images", "/v1/stereo", append([]part{rig}, small...), 422, "rig-size-mismatch", "rig"},
		{"no rig", "/v1/stereo", ref, 400, "missing-part", "rig"},
		{"not a rig", "/v1/stereo", append([]part{{"rig", "rig.json", "application/json", []byte(`{"format": "x"}`)}}, ref...), 422, "invalid-rig", "rig"},
		{"one deformed image", "/v1/stereo", append(append([]part{rig}, ref...), def[0]), 400, "missing-part", "right_deformed"},
		{"bad params", "/v1/stereo", append([]part{rig, {"params", "", "application/json", []byte(`{"strain_window": 4}`)}}, ref...), 422, "invalid-params", "params"},
		{"unknown param", "/v1/stereo", append([]part{rig, {"params", "", "application/json", []byte(`{"subsett": 31}`)}}, ref...), 400, "bad-params", "params"},
		{"not in pairs", "/v1/stereo/series", append([]part{rig}, sp[:3]...), 400, "unpaired-frames", "right"},
		{"extensometer off the image", "/v1/stereo/series", append([]part{rig, {"params", "", "application/json", []byte(`{"extensometers": [{"name": "a", "a": [10, 10], "b": [900, 10]}]}`)}}, sp...), 422, "invalid-params", "params"},
	}
	for _, c := range bad {
		ct, body := multipartBody(t, c.parts...)
		resp, b := ts.do(t, "POST", c.path, ct, body)
		var p service.Problem
		json.Unmarshal(b, &p)
		hit := false
		for _, e := range p.Errors {
			hit = hit || e.Field == c.field
		}
		if resp.StatusCode != c.code || !strings.HasSuffix(p.Type, c.want) || !hit {
			t.Errorf("%s: %d %s; want %d %s naming %s", c.name, resp.StatusCode, b, c.code, c.want, c.field)
		}
	}
	// Refused requests leave no job behind.
	if resp, b := ts.do(t, "GET", "/v1/analyses?kind=stereo", "", nil); resp.StatusCode != 200 || bytes.Contains(b, []byte(`"id"`)) {
		t.Errorf("stereo jobs after refused requests: %d %s; want none", resp.StatusCode, b)
	}
	if resp, b := ts.do(t, "GET", "/v1/series?kind=stereo", "", nil); resp.StatusCode != 200 || bytes.Contains(b, []byte(`"id"`)) {
		t.Errorf("series after refused requests: %d %s; want none", resp.StatusCode, b)
	}
}

package series_test

import (
	"context"
	"encoding/json"
	"math"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/synth"
)

// TestSeriesCalibration follows a 1 % stretch with a calibration of a
// distortion-free camera square-on to the specimen plane, where one pixel
// is exactly 0.2 mm (pinhole projection, Zhang 2000 eq. 1): lengths come
// out in mm (extensometer gauge length 80 px = 16 mm), the strain is the
// same as in pixels, the metadata names the calibration, and it survives a
// saved and restored state. Extensometer coordinates in mm are refused
// with a calibration.
func TestSeriesCalibration(t *testing.T) {
	const w, h = 128, 96
	pat, err := synth.NewPattern(synth.PatternOptions{Diameter: 4, Seed: 3, Bounds: synth.ImageRect(w, h, 16)})
	if err != nil {
		t.Fatal(err)
	}
	var frames []*imageio.Gray
	for _, e := range []float64{0, 0.01, 0.02} {
		m := synth.Affine{F: [2][2]float64{{1 + e, 0}, {0, 1 - 0.3*e}}, CX: 64, CY: 48}
		g, _, err := synth.Render(pat, m, synth.RenderOptions{W: w, H: h, Bits: 12})
		if err != nil {
			t.Fatal(err)
		}
		frames = append(frames, g)
	}
	cal := &calib.File{Format: calib.FileFormat, Image: [2]int{w, h},
		Camera: calib.Params{Fx: 500, Fy: 500, Cx: 63.5, Cy: 47.5},
		Plane:  &calib.Plane{Image: "plane.png", Pose: calib.Pose{T: [3]float64{0, 0, 100}}}}
	p := series.Defaults()
	p.Analysis.Subset, p.Analysis.Step = 21, 8
	p.Analysis.Calibration, p.Analysis.CalibrationName = cal, "bench.json"
	p.Extensometers = []series.Extensometer{{Name: "axial", A: [2]float64{24, 48}, B: [2]float64{104, 48}}}
	tr, err := series.New(frames[0], series.FrameMeta{Name: "ref"}, p)
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	fr, err := tr.Add(ctx, frames[1], series.FrameMeta{})
	if err != nil {
		t.Fatal(err)
	}
	x := fr.Summary.Extensometers[0]
	if math.Abs(x.L0-16) > 1e-9 || math.Abs(x.Eng-0.01) > 3e-4 {
		t.Errorf("extensometer L0 %.6f mm (want 16), strain %.5f (want 0.01)", x.L0, x.Eng)
	}
	if fr.Field.Units["u"] != "mm" {
		t.Errorf("u in %q, want mm", fr.Field.Units["u"])
	}
	if e := fr.Summary.Mean["E11"]; math.Abs(e-0.01005) > 3e-4 { // Green–Lagrange E11 = e + e²/2
		t.Errorf("mean E11 %.5f, want 0.01005", e)
	}
	if c, ok := fr.Field.Meta.Extra["calibration"].(map[string]any); !ok || c["name"] != "bench.json" {
		t.Errorf("frame metadata does not name the calibration: %v", fr.Field.Meta.Extra["calibration"])
	}
	saved, _ := json.Marshal(tr.State())
	var st series.State
	if err := json.Unmarshal(saved, &st); err != nil {
		t.Fatal(err)
	}
	tr, err = series.Restore(frames[0], frames[1], st)
	if err != nil {
		t.Fatal(err)
	}
	fr, err = tr.Add(ctx, frames[2], series.FrameMeta{})
	if err != nil {
		t.Fatal(err)
	}
	if x := fr.Summary.Extensometers[0]; math.Abs(x.L0-16) > 1e-9 || math.Abs(x.Eng-0.02) > 3e-4 {
		t.Errorf("after restore: extensometer L0 %.6f mm, strain %.5f (want 16, 0.02)", x.L0, x.Eng)
	}
	p.Units = "mm"
	if _, err := series.New(frames[0], series.FrameMeta{}, p); err == nil || !strings.Contains(err.Error(), "reference-image px") {
		t.Errorf("units mm with a calibration: %v", err)
	}
}

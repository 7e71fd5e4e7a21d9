package service_test

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/service"
)

// maskPNG is a 128×128 mask with the top rows (y < 24) outside the ROI.
func maskPNG(t *testing.T) []byte {
	t.Helper()
	m := imageio.NewGray(128, 128)
	for y := 24; y < 128; y++ {
		for x := range 128 {
			m.Pix[y*m.Stride+x] = 255
		}
	}
	var b bytes.Buffer
	if err := imageio.WritePNG(&b, m, 8); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// TestSeriesTrackerMask: a series created with a mask part goes through
// the series engine like any other (its frames carry the correlation mode
// and the gauge and extensometer readings, which match the truth of the
// rendered stretch, see checkFrame), and the grid points under the masked
// rows are not measured.
func TestSeriesTrackerMask(t *testing.T) {
	ref, frames, factors := loadSeriesPNG(t)
	ts := newServer(t, func(c *service.Config) { c.Analyzer = service.Pipeline{} })
	ct, body := multipartBody(t, part{"reference", "ref.png", "image/png", ref},
		part{"mask", "mask.png", "image/png", maskPNG(t)}, part{"params", "", "application/json", []byte(trackerParams)})
	resp, b := ts.do(t, "POST", "/v1/series", ct, body)
	if resp.StatusCode != 201 {
		t.Fatalf("POST /v1/series: %d %s", resp.StatusCode, b)
	}
	sid := decodeJSON[struct{ ID string }](t, b).ID
	for _, n := range []int{0, 1, 4} { // frame 4 after 1: the state carries the mask
		j := postFrame(t, ts, sid, n, factors[n], frames[n], true)
		if j.State != "succeeded" || j.Summary == nil {
			t.Fatalf("frame %d: %s %+v", n, j.State, j.Error)
		}
		s := j.Summary
		a := factors[n] * (stretchF11 - 1)
		e11 := a + a*a/2
		t.Logf("frame %d: mode %s, valid %d of %d, gauge E11 %.6f (truth %.6f)", n, s.Mode, s.Valid, s.Points, s.Gauges["gauge_mid_E11_mean"], e11)
		if s.Mode != "direct" || s.Tracked == nil || !has(s.Gauges, "gauge_mid_E11_mean") || !has(s.Gauges, "ext_x_eng") {
			t.Fatalf("frame %d did not go through the series engine: %+v", n, s)
		}
		if math.Abs(s.Gauges["gauge_mid_E11_mean"]-e11) > 1e-4 || math.Abs(s.Gauges["ext_x_eng"]-a) > 1e-4 {
			t.Errorf("frame %d: gauge E11 %.6f, extensometer %.6f; want %.6f, %.6f ± 1e-4", n, s.Gauges["gauge_mid_E11_mean"], s.Gauges["ext_x_eng"], e11, a)
		}
		// The top grid rows (subsets reaching above y = 24) are masked out.
		if s.Valid >= s.Points || float64(s.Valid) < 0.7*float64(s.Points) {
			t.Errorf("frame %d: %d of %d points valid; want the masked top rows left out and the rest measured", n, s.Valid, s.Points)
		}
	}
}

// TestPipelineFrameProgress: the real frame analyzer reports progress
// while it correlates: done never decreases, never exceeds the total, and
// ends equal to it.
func TestPipelineFrameProgress(t *testing.T) {
	refB, frames, _ := loadSeriesPNG(t)
	dec := func(b []byte) *imageio.Gray {
		g, err := imageio.Decode(bytes.NewReader(b), imageio.Limits{})
		if err != nil {
			t.Fatal(err)
		}
		return g
	}
	// The stored form of a series' parameters: analysis parameters with
	// every default filled in (series-engine ones may sit beside them).
	sp := series.Defaults()
	sp.Analysis.Subset, sp.Analysis.Step = 21, 8
	params, err := json.Marshal(sp.Analysis)
	if err != nil {
		t.Fatal(err)
	}
	calls, last, lastTotal, bad := 0, 0, 0, false
	in := service.FrameInput{Ref: dec(refB), Def: dec(frames[0]), Params: params, Name: "frame_0",
		Progress: func(done, total int) {
			bad = bad || done < last || done > total
			calls, last, lastTotal = calls+1, done, total
		}}
	if _, err := (service.Pipeline{}).Frame(context.Background(), in); err != nil {
		t.Fatal(err)
	}
	if calls < 2 || bad || last != lastTotal || last == 0 {
		t.Errorf("progress: %d calls, out of order %v, last %d of %d", calls, bad, last, lastTotal)
	}
}

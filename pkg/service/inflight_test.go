package service_test

import (
	"fmt"
	"net/http"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/service"
)

// TestSeriesInFlightShown checks that the bound on frames in flight of a
// series (issue 21) is in its record (max_frames_in_flight) and in
// /metrics (mottle_series_max_frames_in_flight), and that /metrics shows
// the frames of the series being computed
// (mottle_series_frames_in_flight{series}) while one is, and not after.
func TestSeriesInFlightShown(t *testing.T) {
	h := newHolder()
	ts := newServer(t, func(c *service.Config) { c.MaxFramesInFlight = 3; c.BeforeCompute = h.hook })
	ct, body := multipartBody(t, part{"reference", "ref.png", "image/png", encodePNG(t, speckle(40, 40, 0, 0, 11))},
		part{"params", "", "application/json", []byte(`{"subset": 15}`)})
	resp, b := ts.do(t, "POST", "/v1/series", ct, body)
	if resp.StatusCode != http.StatusCreated {
		t.Fatalf("POST /v1/series: %d %s", resp.StatusCode, b)
	}
	sid := decodeJSON[struct{ ID string }](t, b).ID
	_, b = ts.do(t, "GET", "/v1/series/"+sid, "", nil)
	if got := decodeJSON[struct {
		Max int `json:"max_frames_in_flight"`
	}](t, b).Max; got != 3 {
		t.Errorf("series record: max_frames_in_flight %d, want 3 (%s)", got, b)
	}
	metrics := func() string {
		_, b := ts.do(t, "GET", "/metrics", "", nil)
		return string(b)
	}
	gauge := fmt.Sprintf("mottle_series_frames_in_flight{series=%q} 1\n", sid)
	if resp, b := ts.do(t, "POST", "/v1/series/"+sid+"/frames?wait=false", "image/png", encodePNG(t, speckle(40, 40, 1, 0, 11))); resp.StatusCode != 202 {
		t.Fatalf("frame: %d %s", resp.StatusCode, b)
	}
	h.next(t) // the frame is held in the middle of its computation
	m := metrics()
	if !strings.Contains(m, "\nmottle_series_max_frames_in_flight 3\n") {
		t.Errorf("/metrics does not give the bound 3")
	}
	if !strings.Contains(m, "\n"+gauge) {
		t.Errorf("/metrics does not show the series' frame in flight (%q):\n%s", gauge, m)
	}
	h.release()
	ts.waitDone(t, "/v1/series/"+sid+"/frames/0")
	// The gauge drops just after the record says succeeded.
	poll(t, "the series' frames in flight to leave /metrics", func() bool {
		return !strings.Contains(metrics(), fmt.Sprintf("{series=%q}", sid))
	})
}

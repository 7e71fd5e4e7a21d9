package service_test

import (
	"bytes"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/service"
)

// Results on demand: a job writes only what its formats ask for (by
// default the stored result field.npz and field.json), and every other download is
// rendered from field.npz on first request and kept; it holds exactly what
// a job that wrote every format holds (field.json differs only in its
// creation time and timings, so the CSV, VTS and arrays are compared).
func TestFormatsOnDemand(t *testing.T) {
	ts := newServer(t, func(c *service.Config) { c.Analyzer = service.Pipeline{} })
	ref, def := realPair(t, 96, 1.2, -0.7)
	ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 21, "step": 8}`)...)
	resp, b := ts.do(t, "POST", "/v1/analyses?wait=true", ct, body)
	if resp.StatusCode != 200 {
		t.Fatalf("default formats: %d %s", resp.StatusCode, b)
	}
	lean := decodeJSON[struct {
		ID      string   `json:"id"`
		Results []string `json:"results"`
	}](t, b)
	if strings.Join(lean.Results, ",") != "field.json,field.npz" {
		t.Errorf("default results %v, want field.json and field.npz", lean.Results)
	}
	resp, b = ts.do(t, "POST", "/v1/analyses?wait=true&formats=all", ct, body)
	if resp.StatusCode != 200 {
		t.Fatalf("formats=all: %d %s", resp.StatusCode, b)
	}
	full := decodeJSON[struct {
		ID      string   `json:"id"`
		Results []string `json:"results"`
	}](t, b)
	if len(full.Results) < 10 {
		t.Errorf("formats=all wrote %v", full.Results)
	}
	for _, name := range []string{"field.csv", "field.vts", "arrays/E11.npy", "arrays/grid_x.npy"} {
		for range 2 { // rendered, then kept
			r1, a := ts.do(t, "GET", "/v1/analyses/"+lean.ID+"/"+name, "", nil)
			r2, want := ts.do(t, "GET", "/v1/analyses/"+full.ID+"/"+name, "", nil)
			if r1.StatusCode != 200 || r2.StatusCode != 200 || !bytes.Equal(a, want) {
				t.Errorf("%s: on demand %d (%d bytes), written with the job %d (%d bytes)", name, r1.StatusCode, len(a), r2.StatusCode, len(want))
			}
		}
	}
	if r, b := ts.do(t, "GET", "/v1/analyses/"+lean.ID+"/field.json", "", nil); r.StatusCode != 200 || !bytes.Contains(b, []byte(`"precision":"float32"`)) {
		t.Errorf("field.json: %d %.200s", r.StatusCode, b)
	}
	if r, b := ts.do(t, "GET", "/v1/analyses/"+lean.ID+"/arrays/nope.npy", "", nil); r.StatusCode != 404 || !bytes.Contains(b, []byte("E11")) {
		t.Errorf("unknown array on demand: %d %s", r.StatusCode, b)
	}
	if r, b := ts.do(t, "POST", "/v1/analyses?formats=xlsx", ct, body); r.StatusCode != 400 || !bytes.Contains(b, []byte(`"formats"`)) {
		t.Errorf("unknown format: %d %s", r.StatusCode, b)
	}
}

// TestSeriesFormats: a series whose request names no formats has its
// frames write field.npz alone (service.SeriesDefaultFormats), and a
// frame's field.json is then rendered from it on request (byte for byte
// the file written with the frame: runner.TestFrameJSONFromNPZ) and kept;
// a series that asks for json has its frames write both.
func TestSeriesFormats(t *testing.T) {
	ts := newServer(t, func(c *service.Config) { c.Analyzer = service.Pipeline{} })
	ref, def := realPair(t, 96, 1.2, -0.7)
	for _, c := range []struct{ query, want string }{{"", "field.npz"}, {"?formats=npz,json", "field.json,field.npz"}} {
		ct, body := multipartBody(t, part{"reference", "ref.png", "image/png", ref}, part{"params", "", "application/json", []byte(`{"subset": 21, "step": 8}`)})
		resp, b := ts.do(t, "POST", "/v1/series"+c.query, ct, body)
		if resp.StatusCode != 201 {
			t.Fatalf("POST /v1/series%s: %d %s", c.query, resp.StatusCode, b)
		}
		sid := decodeJSON[struct{ ID string }](t, b).ID
		resp, b = ts.do(t, "POST", "/v1/series/"+sid+"/frames", "image/png", def)
		if resp.StatusCode != 200 {
			t.Fatalf("frame: %d %s", resp.StatusCode, b)
		}
		fr := decodeJSON[struct {
			State   string   `json:"state"`
			Results []string `json:"results"`
		}](t, b)
		if fr.State != "succeeded" || strings.Join(fr.Results, ",") != c.want {
			t.Errorf("series%s: frame %s with results %v, want %s", c.query, fr.State, fr.Results, c.want)
		}
		var first []byte
		for k := range 2 { // rendered (or stored), then kept
			r, b := ts.do(t, "GET", "/v1/series/"+sid+"/frames/0/field.json", "", nil)
			if r.StatusCode != 200 || !bytes.Contains(b, []byte(`"precision":"float32"`)) {
				t.Fatalf("series%s: field.json: %d %.200s", c.query, r.StatusCode, b)
			}
			if k == 1 && !bytes.Equal(b, first) {
				t.Errorf("series%s: field.json changed between two requests", c.query)
			}
			first = b
		}
	}
}

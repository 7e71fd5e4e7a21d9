package service_test

import (
	"encoding/json"
	"os"
	"path/filepath"
	"testing"

	"github.com/mottledic/mottle/pkg/service"
)

// TestJPEGOrientationThroughService posts the EXIF-tagged pair of
// testdata/images (orientation 6, CIPA DC-008 tag 0x0112: the stored
// 120 × 160 px frames show upright after a quarter turn clockwise) and its
// upright twin to the service with the real pipeline: the tagged pair is
// measured upright (160 × 160 → 160 × 120 px), its field.json records the
// turn, and its mean displacement matches the upright pair's (the scene
// moved u = 1.3, v = −0.6 px; unturned it would read u ≈ 0.6, v ≈ 1.3).
func TestJPEGOrientationThroughService(t *testing.T) {
	ts := newServer(t, func(c *service.Config) { c.Analyzer, c.Workers = service.Pipeline{}, 1 })
	td := filepath.Join("..", "..", "testdata", "images")
	type doc struct {
		Meta struct {
			W     int            `json:"image_width"`
			H     int            `json:"image_height"`
			Extra map[string]any `json:"extra"`
		} `json:"meta"`
	}
	means := map[string][2]float64{}
	for _, kind := range []string{"upright", "exif6"} {
		ref, err := os.ReadFile(filepath.Join(td, "scene-ref-"+kind+".jpg"))
		if err != nil {
			t.Fatal(err)
		}
		def, err := os.ReadFile(filepath.Join(td, "scene-def-"+kind+".jpg"))
		if err != nil {
			t.Fatal(err)
		}
		ct, body := multipartBody(t, []part{{"reference", "ref.jpg", "image/jpeg", ref}, {"deformed", "def.jpg", "image/jpeg", def},
			{"params", "", "application/json", []byte(`{"subset": 25, "step": 10}`)}}...)
		resp, b := ts.do(t, "POST", "/v1/analyses?wait=true", ct, body)
		if resp.StatusCode != 200 {
			t.Fatalf("%s: POST: %d %s", kind, resp.StatusCode, b)
		}
		j := decodeJSON[jobDoc](t, b)
		resp, b = ts.do(t, "GET", "/v1/analyses/"+j.ID+"/field.json", "", nil)
		if resp.StatusCode != 200 {
			t.Fatalf("%s: field.json: %d %s", kind, resp.StatusCode, b)
		}
		var d doc
		if err := json.Unmarshal(b, &d); err != nil {
			t.Fatal(err)
		}
		if d.Meta.W != 160 || d.Meta.H != 120 {
			t.Errorf("%s: measured on %d×%d px, want the upright 160×120", kind, d.Meta.W, d.Meta.H)
		}
		o, _ := d.Meta.Extra["orientation"].(map[string]any)
		if kind == "exif6" && (o == nil || o["exif"] != 6.0) {
			t.Errorf("the tagged pair's field.json records orientation %v, want exif 6", d.Meta.Extra["orientation"])
		}
		if kind == "upright" && o != nil {
			t.Errorf("the upright pair records an orientation: %v", o)
		}
		var q struct {
			Quantities map[string][]*float64 `json:"quantities"`
		}
		_ = json.Unmarshal(b, &q)
		var su, sv float64
		n := 0
		for i, u := range q.Quantities["u"] {
			if v := q.Quantities["v"][i]; u != nil && v != nil {
				su, sv, n = su+*u, sv+*v, n+1
			}
		}
		if n == 0 {
			t.Fatalf("%s: no measured point in field.json", kind)
		}
		means[kind] = [2]float64{su / float64(n), sv / float64(n)}
	}
	a, b := means["upright"], means["exif6"]
	if d0, d1 := a[0]-b[0], a[1]-b[1]; d0*d0+d1*d1 > 0.01*0.01 || a[0] < 1.2 || a[0] > 1.4 {
		t.Errorf("mean (u, v) upright %v, tagged %v; want equal within 0.01 px and u ≈ 1.3 px", a, b)
	}
}

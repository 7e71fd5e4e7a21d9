package service_test

import (
	"bytes"
	"encoding/json"
	"image/png"
	"math"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/synth"
)

// realPair renders a 128×128 reference and its copy translated by (u, v)
// with the exact Boolean-model renderer of pkg/synth (Sur, Blaysat &
// Grédiac 2018), as PNG bytes.
func realPair(t testing.TB, size int, u, v float64) (ref, def []byte) {
	t.Helper()
	r, d, err := synth.Pair(synth.PatternOptions{Diameter: 4, Seed: 3}, synth.Translation{U: u, V: v},
		synth.RenderOptions{W: size, H: size, Bits: 8})
	if err != nil {
		t.Fatal(err)
	}
	enc := func(g *imageio.Gray) []byte {
		var b bytes.Buffer
		if err := imageio.WritePNG(&b, g, 8); err != nil {
			t.Fatal(err)
		}
		return b.Bytes()
	}
	return enc(r), enc(d)
}

// TestPipeline runs the real pipeline through the service on a rendered
// translation: the mean displacement must match the truth within 0.02 px
// (a subpixel translation of a noise-free 8-bit image; DIC translation
// errors are a few hundredths of a pixel at most, Schreier, Braasch &
// Sutton 2000), and every result format and a map must be served.
func TestPipeline(t *testing.T) {
	ts := newServer(t, func(c *service.Config) { c.Analyzer, c.Workers = service.Pipeline{}, 2 })

	const u, v = 1.3, -0.6
	ref, def := realPair(t, 128, u, v)
	ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 21, "step": 12}`)...)
	resp, b := ts.do(t, "POST", "/v1/analyses?wait=true", ct, body)
	if resp.StatusCode != 200 {
		t.Fatalf("POST: %d %s", resp.StatusCode, b)
	}
	j := decodeJSON[jobDoc](t, b)
	if j.Summary == nil || j.Summary.ValidFraction < 0.6 { // points whose subset leaves the image are not valid
		t.Fatalf("summary %+v", j.Summary)
	}
	if du, dv := j.Summary.Mean["u"]-u, j.Summary.Mean["v"]-v; math.Abs(du) > 0.02 || math.Abs(dv) > 0.02 {
		t.Errorf("mean u, v = %.4f, %.4f; truth %.1f, %.1f", j.Summary.Mean["u"], j.Summary.Mean["v"], u, v)
	}
	// A rigid translation has no strain (common practice); the mean over
	// the grid of a noise-free pair is within interpolation bias, a few
	// 1e-5 here, so 2e-4 fails on any real strain error.
	if math.Abs(j.Summary.Mean["E11"]) > 2e-4 {
		t.Errorf("mean E11 of a translation = %g, want ≈ 0", j.Summary.Mean["E11"])
	}
	if len(j.Field) == 0 {
		t.Error("wait=true answer has no field")
	}
	base := "/v1/analyses/" + j.ID
	for _, f := range []struct{ path, magic string }{
		{"/field.json", "{"}, {"/field.csv", ""}, {"/field.vts", "<?xml"}, {"/field.npz", "PK"},
		{"/arrays/E11.npy", "\x93NUMPY"}, {"/arrays/grid_x.npy", "\x93NUMPY"},
	} {
		resp, b := ts.do(t, "GET", base+f.path, "", nil)
		if resp.StatusCode != 200 || !strings.HasPrefix(string(b), f.magic) || len(b) < 10 {
			t.Errorf("GET %s: %d %.40q", f.path, resp.StatusCode, b)
		}
		if f.path == "/field.json" {
			// The answer carries field.json as it is stored.
			var got, want bytes.Buffer
			if err := json.Compact(&got, j.Field); err != nil {
				t.Errorf("the answer's field: %v", err)
			}
			if err := json.Compact(&want, b); err != nil || got.String() != want.String() {
				t.Errorf("the answer's field (%d bytes compact) is not field.json (%d bytes): %v", got.Len(), want.Len(), err)
			}
		}
	}
	for _, on := range []string{"reference", "deformed"} {
		resp, b := ts.do(t, "GET", base+"/map.png?quantity=u&on="+on, "", nil)
		if resp.StatusCode != 200 {
			t.Fatalf("map on %s: %d %s", on, resp.StatusCode, b)
		}
		if _, err := png.Decode(bytes.NewReader(b)); err != nil {
			t.Errorf("map on %s: %v", on, err)
		}
	}
	resp, b = ts.do(t, "GET", base+"/map.png?quantity=nope", "", nil)
	if resp.StatusCode != 400 || !strings.Contains(string(b), "E11") {
		t.Errorf("unknown quantity: %d %s", resp.StatusCode, b)
	}
}

package service_test

import (
	"bytes"
	"image"
	"image/png"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/synth"
)

// TestImageStretch checks the display option of the image routes on a
// 12-bit pair stored in 16-bit PNGs: without it the image's own levels come
// back (16-bit, at most 4095), with stretch=true an 8-bit PNG whose grey
// range spans exactly 0–255, and a bad value is a 400 naming the query.
func TestImageStretch(t *testing.T) {
	ts := newServer(t, func(c *service.Config) { c.Analyzer, c.Workers = service.Pipeline{}, 1 })

	r, d, err := synth.Pair(synth.PatternOptions{Diameter: 4, Seed: 5}, synth.Translation{U: 0.4},
		synth.RenderOptions{W: 96, H: 96, Bits: 16, Gain: 4095})
	if err != nil {
		t.Fatal(err)
	}
	enc := func(g *imageio.Gray) []byte {
		var b bytes.Buffer
		if err := imageio.WritePNG(&b, g, 16); err != nil {
			t.Fatal(err)
		}
		return b.Bytes()
	}
	ct, body := multipartBody(t, analysisParts(enc(r), enc(d), `{"subset": 21, "step": 16}`)...)
	resp, b := ts.do(t, "POST", "/v1/analyses?wait=true", ct, body)
	if resp.StatusCode != 200 {
		t.Fatalf("POST: %d %s", resp.StatusCode, b)
	}
	id := decodeJSON[jobDoc](t, b).ID
	get := func(q string) (image.Image, int) {
		resp, b := ts.do(t, "GET", "/v1/analyses/"+id+"/images/reference.png"+q, "", nil)
		if resp.StatusCode != 200 {
			return nil, resp.StatusCode
		}
		img, err := png.Decode(bytes.NewReader(b))
		if err != nil {
			t.Fatalf("%s: %v", q, err)
		}
		return img, 200
	}
	span := func(img image.Image) (lo, hi uint32) {
		lo = 1 << 31
		bd := img.Bounds()
		for y := bd.Min.Y; y < bd.Max.Y; y++ {
			for x := bd.Min.X; x < bd.Max.X; x++ {
				v, _, _, _ := img.At(x, y).RGBA()
				lo, hi = min(lo, v), max(hi, v)
			}
		}
		return lo >> 8, hi >> 8
	}
	raw, _ := get("")
	if _, ok := raw.(*image.Gray16); !ok {
		t.Errorf("native levels: got %T, want a 16-bit grey PNG", raw)
	}
	if _, hi := span(raw); hi > 4095>>8 {
		t.Errorf("native levels reach %d/255 of full scale, want at most 4095/65535", hi)
	}
	st, _ := get("?stretch=true")
	if _, ok := st.(*image.Gray); !ok {
		t.Errorf("stretched: got %T, want an 8-bit grey PNG", st)
	}
	if lo, hi := span(st); lo != 0 || hi != 255 {
		t.Errorf("stretched range %d…%d, want 0…255", lo, hi)
	}
	if _, code := get("?stretch=yes"); code != 400 {
		t.Errorf("stretch=yes: %d, want 400", code)
	}
}

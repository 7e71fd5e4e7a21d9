package service_test

import (
	"bytes"
	"encoding/base64"
	"image"
	"image/png"
	"math"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/synth"
)

// TestImageCheck posts 16-bit images the browser cannot show (a 16-bit PNG
// and a TIFF with 12-bit levels in 16-bit samples) and checks the answer
// against the rendered image: size, depth, grey statistics (gonum stat),
// the speckle size against imageio.SpeckleSize of the rendered image
// (the autocorrelation measure of the iDICs Good Practices Guide 2018),
// the advice (at least 3 speckles across a subset, iDICs 2018; step a
// third to a half of the subset, common practice) and the preview, which
// must be the image with its grey range mapped linearly onto 0–255.
func TestImageCheck(t *testing.T) {
	ts := newServer(t, nil)
	cases := []struct {
		name, ctype string
		w, h, bits  int
		diameter    float64
		encode      func(*bytes.Buffer, *imageio.Gray) error
	}{
		{"16-bit PNG", "image/png", 160, 128, 16, 5, func(b *bytes.Buffer, g *imageio.Gray) error { return imageio.WritePNG(b, g, 16) }},
		{"12-bit TIFF", "image/tiff", 144, 176, 12, 4, func(b *bytes.Buffer, g *imageio.Gray) error { return imageio.WriteTIFF(b, g, 16) }},
		{"TIFF as octet-stream", "application/octet-stream", 128, 128, 16, 3, func(b *bytes.Buffer, g *imageio.Gray) error { return imageio.WriteTIFF(b, g, 16) }},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			pat, err := synth.NewPattern(synth.PatternOptions{Diameter: c.diameter, Seed: 5, Bounds: synth.ImageRect(c.w, c.h, 4)})
			if err != nil {
				t.Fatal(err)
			}
			g, _, err := synth.Render(pat, synth.Identity{}, synth.RenderOptions{W: c.w, H: c.h, Bits: c.bits, Supersample: 2, Noise: 2})
			if err != nil {
				t.Fatal(err)
			}
			var file bytes.Buffer
			if err := c.encode(&file, g); err != nil {
				t.Fatal(err)
			}
			resp, b := ts.do(t, "POST", "/v1/images/check", c.ctype, file.Bytes())
			if resp.StatusCode != 200 {
				t.Fatalf("image check: %d %s", resp.StatusCode, b)
			}
			got := decodeJSON[service.ImageCheck](t, b)
			if got.Width != c.w || got.Height != c.h || got.Bits != 16 {
				t.Errorf("the image check says %d×%d px, %d bits; want %d×%d px, 16 bits", got.Width, got.Height, got.Bits, c.w, c.h)
			}

			// Grey statistics against gonum (population standard deviation).
			px := make([]float64, 0, c.w*c.h)
			for y := 0; y < c.h; y++ {
				for x := 0; x < c.w; x++ {
					px = append(px, float64(g.At(x, y)))
				}
			}
			mean, std := stat.PopMeanStdDev(px, nil)
			lo, hi := px[0], px[0]
			for _, v := range px {
				lo, hi = math.Min(lo, v), math.Max(hi, v)
			}
			if math.Abs(got.Grey.Mean-mean) > 1e-6*mean || math.Abs(got.Grey.Std-std) > 1e-6*std || got.Grey.Min != lo || got.Grey.Max != hi {
				t.Errorf("grey %+v, gonum gives mean %v, std %v, min %v, max %v", got.Grey, mean, std, lo, hi)
			}
			if c.bits == 12 && hi > 4095 {
				t.Fatalf("a 12-bit render has level %v", hi)
			}

			// Speckle size: within 15 % of imageio.SpeckleSize of the image
			// as rendered, before encoding and the trip through the service.
			want, err := imageio.SpeckleSize(g)
			if err != nil {
				t.Fatal(err)
			}
			if got.SpeckleSizePx == nil {
				t.Fatalf("no speckle size: %s", got.SpeckleError)
			}
			s := *got.SpeckleSizePx
			t.Logf("%s: speckle size %.3f px (imageio %.3f px) for %g px discs; advice %+v", c.name, s, want, c.diameter, got.Advice)
			if math.Abs(s-want) > 0.15*want {
				t.Errorf("speckle size %.3f px, imageio.SpeckleSize %.3f px", s, want)
			}
			a := got.Advice
			if a == nil {
				t.Fatal("no advice with a speckle size")
			}
			for _, sub := range []struct {
				v      int
				across float64
			}{{a.MinSubsetPx, 3 * s}, {a.SubsetPx, 6 * s}} {
				lo := math.Max(sub.across, 7)
				if sub.v%2 != 1 || float64(sub.v) < lo || float64(sub.v) > lo+2 {
					t.Errorf("advised subset %d px for %.2f px of speckles across, want the next odd size", sub.v, sub.across)
				}
			}
			if a.StepMinPx < a.SubsetPx/3 || a.StepMinPx > a.SubsetPx/3+1 || a.StepMaxPx < a.SubsetPx/2 || a.StepMaxPx > a.SubsetPx/2+1 {
				t.Errorf("advised step %d–%d px for a %d px subset, want a third to a half", a.StepMinPx, a.StepMaxPx, a.SubsetPx)
			}

			// The preview: 8-bit, full size, (v − min)/(max − min)·255.
			const prefix = "data:image/png;base64,"
			if !strings.HasPrefix(got.PreviewPNG, prefix) {
				t.Fatalf("preview is not a PNG data URL: %.40q", got.PreviewPNG)
			}
			raw, err := base64.StdEncoding.DecodeString(got.PreviewPNG[len(prefix):])
			if err != nil {
				t.Fatalf("preview base64: %v", err)
			}
			img, err := png.Decode(bytes.NewReader(raw))
			if err != nil {
				t.Fatalf("preview PNG: %v", err)
			}
			pg, ok := img.(*image.Gray)
			if !ok {
				t.Fatalf("preview is %T, want an 8-bit grey PNG", img)
			}
			if b := pg.Bounds(); b.Dx() != c.w || b.Dy() != c.h {
				t.Fatalf("preview is %v, want %d×%d", b, c.w, c.h)
			}
			var worst float64
			var pmin, pmax uint8 = 255, 0
			for y := 0; y < c.h; y++ {
				for x := 0; x < c.w; x++ {
					v := pg.GrayAt(x, y).Y
					pmin, pmax = min(pmin, v), max(pmax, v)
					worst = math.Max(worst, math.Abs(float64(v)-(float64(g.At(x, y))-lo)/(hi-lo)*255))
				}
			}
			if pmin != 0 || pmax != 255 || worst > 0.5+1e-6 {
				t.Errorf("preview spans %d–%d and is off the linear stretch by up to %.2f levels; want 0–255 within rounding", pmin, pmax, worst)
			}
		})
	}
}

// TestImageCheckBadInput sends bodies the route must refuse with a problem
// document, as the upload routes do; the server then still checks a
// good image.
func TestImageCheckBadInput(t *testing.T) {
	ts := newServer(t, func(c *service.Config) { c.MaxBodyBytes = 100 << 10 })
	good := encodePNG(t, speckle(64, 48, 0, 0, 3))
	cases := []struct {
		name, ctype string
		body        []byte
		status      int
		field       string
	}{
		{"truncated PNG", "image/png", good[:len(good)/2], 400, "body"},
		{"not an image", "image/png", []byte("hello, I am text"), 415, "body"},
		{"header declares 100000×100000 px", "image/tiff", hugeTIFF(), 413, "body"},
		{"body too large", "application/octet-stream", make([]byte, 200<<10), 413, "body"},
		{"text content type", "text/plain", good, 415, "body"},
		{"no content type", "", good, 415, "Content-Type"},
		{"multipart", "multipart/form-data; boundary=x", good, 415, "Content-Type"},
		{"empty body", "image/png", nil, 415, "body"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			resp, b := ts.do(t, "POST", "/v1/images/check", c.ctype, c.body)
			if resp.StatusCode != c.status {
				t.Fatalf("%d, want %d: %s", resp.StatusCode, c.status, b)
			}
			if ct := resp.Header.Get("Content-Type"); ct != "application/problem+json" {
				t.Errorf("Content-Type %q", ct)
			}
			p := decodeJSON[problemDoc](t, b)
			found := false
			for _, f := range p.Errors {
				found = found || f.Field == c.field && f.Detail != ""
			}
			if p.Status != c.status || p.Title == "" || p.Detail == "" || !found {
				t.Errorf("problem %s, want status %d naming %q", b, c.status, c.field)
			}
		})
	}
	if resp, b := ts.do(t, "POST", "/v1/images/check", "image/png", good); resp.StatusCode != 200 {
		t.Errorf("a good image after bad ones: %d %s", resp.StatusCode, b)
	}
}

// TestImageCheckAuth checks that the route needs the token like other /v1 routes.
func TestImageCheckAuth(t *testing.T) {
	ts := newServer(t, func(c *service.Config) { c.Tokens = []string{"s3cret-token-for-tests"} })
	good := encodePNG(t, speckle(64, 48, 0, 0, 3))
	tok := ts.token
	ts.token = ""
	if resp, b := ts.do(t, "POST", "/v1/images/check", "image/png", good); resp.StatusCode != 401 {
		t.Errorf("without a token: %d %s, want 401", resp.StatusCode, b)
	}
	ts.token = tok
	if resp, b := ts.do(t, "POST", "/v1/images/check", "image/png", good); resp.StatusCode != 200 {
		t.Errorf("with the token: %d %s, want 200", resp.StatusCode, b)
	}
}

// TestPreviewOf64Megapixels: the image check's preview of a 64-megapixel
// frame (8000 × 8000 px, a machine-vision camera's full sensor) is a
// display copy of at most PreviewMaxPx = 1600 px on its long side that
// decodes as an 8-bit grey PNG, keeps the aspect ratio, and is the box
// mean of the stretched image (imaging.Box: each preview pixel the mean
// of the 5 × 5 image pixels it covers). A 4000 × 1000 image keeps its 4:1
// shape, and one at the bound is not reduced.
func TestPreviewOf64Megapixels(t *testing.T) {
	cases := []struct{ w, h, pw, ph int }{
		{8000, 8000, 1600, 1600},
		{4000, 1000, 1600, 400},
		{1600, 900, 1600, 900},
	}
	for _, c := range cases {
		g := imageio.NewGray(c.w, c.h)
		g.Bits = 16
		// 5 px squares alternating 1000 and 3000: the box mean over each
		// 5 × 5 block of the 8000 px case is the square's own level.
		for y := 0; y < c.h; y++ {
			for x := 0; x < c.w; x++ {
				if (x/5+y/5)%2 == 0 {
					g.Pix[y*g.Stride+x] = 1000
				} else {
					g.Pix[y*g.Stride+x] = 3000
				}
			}
		}
		b, pw, ph, err := service.PreviewPNG(g, 1000, 3000)
		if err != nil {
			t.Fatal(err)
		}
		img, err := png.Decode(bytes.NewReader(b))
		if err != nil {
			t.Fatalf("%d×%d: the preview does not decode: %v", c.w, c.h, err)
		}
		pg, ok := img.(*image.Gray)
		if !ok {
			t.Fatalf("%d×%d: preview is %T, want 8-bit grey", c.w, c.h, img)
		}
		if r := pg.Bounds(); r.Dx() != c.pw || r.Dy() != c.ph || pw != c.pw || ph != c.ph {
			t.Fatalf("%d×%d: preview %v (reported %d×%d), want %d×%d", c.w, c.h, r, pw, ph, c.pw, c.ph)
		}
		if max(pw, ph) > service.PreviewMaxPx {
			t.Fatalf("%d×%d: preview long side %d > %d", c.w, c.h, max(pw, ph), service.PreviewMaxPx)
		}
		if c.w == 8000 {
			for _, p := range [][2]int{{0, 0}, {1, 0}, {0, 1}, {800, 801}, {1599, 1599}} {
				want := uint8(0)
				if (p[0]+p[1])%2 == 1 {
					want = 255
				}
				if v := pg.GrayAt(p[0], p[1]).Y; int(v)-int(want) > 1 || int(want)-int(v) > 1 {
					t.Errorf("preview pixel %v = %d, the box mean of its 5 × 5 square is %d", p, v, want)
				}
			}
			t.Logf("64 Mpx preview: %d×%d px, %d kB of PNG", pw, ph, len(b)/1024)
		}
	}
}

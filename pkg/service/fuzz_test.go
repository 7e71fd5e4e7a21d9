package service_test

import (
	"bytes"
	"encoding/json"
	"image"
	"image/color"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service"
)

// checkAnswer fails unless the answer is 202 (accepted) or a 4xx problem
// document: bad input must never cause a 5xx or a panic.
func checkAnswer(t *testing.T, rec *httptest.ResponseRecorder) {
	switch {
	case rec.Code == http.StatusAccepted, rec.Code == http.StatusTooManyRequests:
	case rec.Code >= 400 && rec.Code < 500:
		if rec.Header().Get("Content-Type") != "application/problem+json" {
			t.Fatalf("%d without a problem document: %s", rec.Code, rec.Body)
		}
	default:
		t.Fatalf("status %d: %s", rec.Code, rec.Body)
	}
}

// FuzzParams submits a valid pair with fuzzed parameter JSON. The service
// accepts exactly the parameters that analysis.ParseJSONBytes reads and
// Validate passes for the 32×32 pair (every step gives fewer grid points
// than the server's limit of 5000 there), and the parameters it records
// and answers read back as the same parameters: the parameter JSON makes
// the round trip request → record → answer unchanged.
func FuzzParams(f *testing.F) {
	for _, s := range []string{``, `{}`, `{"subset": 15}`, `{"subset": 15, "step": 4, "shape": "second"}`,
		`{"roi": {"rect": [0, 0, 10, 10]}}`, `{"roi": {"polygon": [[1, 1], [30, 1], [20, 30]], "holes": [[[5, 5]]]}}`,
		`{"seeds": [[16, 16]]}`, `{"subset": 1e400}`, `{"scale_points": {"a": [0, 0], "b": [10, 0], "distance_mm": 5}}`,
		`{"subset": -3}`, `[1, 2]`, `{"subset": 15}{}`, `null`, `{"strain_fit": "quadratic", "strain_window": 3}`} {
		f.Add(s)
	}
	ts := newServerWith(f, true, func(c *service.Config) { c.MaxPoints = 5000; c.JobTimeout = time.Second })
	ref, def := pair(f, 32, 32, 1, 0, 21)
	f.Fuzz(func(t *testing.T, params string) {
		ct, body := multipartBody(t, analysisParts(ref, def, "x")...)
		// Replace the placeholder params with the fuzzed ones.
		body = bytes.Replace(body, []byte("\r\n\r\nx\r\n"), []byte("\r\n\r\n"+params+"\r\n"), 1)
		req := httptest.NewRequest("POST", "/v1/analyses", bytes.NewReader(body))
		req.Header.Set("Content-Type", ct)
		rec := httptest.NewRecorder()
		ts.srv.Handler().ServeHTTP(rec, req)
		checkAnswer(t, rec)
		if rec.Code == http.StatusTooManyRequests {
			return // the queue is full of earlier inputs' jobs
		}
		if strings.Contains(params, "\r\n--") {
			return // may end the part early: the server reads other params
		}
		p, err := analysis.ParseJSONBytes([]byte(params))
		if err == nil {
			err = p.Validate(32, 32)
		}
		if accepted := rec.Code == http.StatusAccepted; accepted != (err == nil) {
			t.Fatalf("answer %d for parameters that read and validate with error %v: %s", rec.Code, err, rec.Body)
		}
		if err != nil {
			return
		}
		var ans struct {
			Params        json.RawMessage `json:"params"`
			Width, Height int
		}
		if err := json.Unmarshal(rec.Body.Bytes(), &ans); err != nil {
			t.Fatalf("answer: %v: %s", err, rec.Body)
		}
		back, err := analysis.ParseJSONBytes(ans.Params)
		if err != nil {
			t.Fatalf("the answered parameters %s do not read: %v", ans.Params, err)
		}
		want, _ := json.Marshal(p)
		got, _ := json.Marshal(back)
		if !bytes.Equal(want, got) {
			t.Fatalf("parameters sent %s, recorded and answered as %s (%s)", want, got, ans.Params)
		}
		if ans.Width != 32 || ans.Height != 32 {
			t.Fatalf("answered image size %d×%d, want 32×32", ans.Width, ans.Height)
		}
	})
}

// FuzzImage submits a fuzzed deformed image, through the multipart path
// and as a raw series frame. An image that imageio.Decode reads must have
// the size and bit depth its header declares, read by image.DecodeConfig
// of the standard library and golang.org/x/image (16 bits for the 16-bit
// colour models, 8 for the others), and grey levels within that depth;
// the service accepts the image exactly when it decodes with the size of
// the 32×32 reference (a PNG frame of a series: when imageio.CheckPNG
// passes it with that size, which it does for every PNG that decodes).
func FuzzImage(f *testing.F) {
	ref, def := pair(f, 32, 32, 1, 0, 22)
	f.Add(def)
	f.Add(def[:len(def)/3])
	f.Add(hugeTIFF())
	f.Add([]byte("BM\x00\x00"))
	f.Add([]byte("\xff\xd8\xff\xe0"))
	for _, bits := range []int{8, 16} {
		g, err := imageio.Decode(bytes.NewReader(def), imageio.Limits{})
		if err != nil {
			f.Fatal(err)
		}
		var b bytes.Buffer
		if err := imageio.WriteTIFF(&b, g, bits); err != nil {
			f.Fatal(err)
		}
		f.Add(b.Bytes())
		b.Reset()
		if err := imageio.WritePNG(&b, g, bits); err != nil {
			f.Fatal(err)
		}
		f.Add(b.Bytes())
		b.Reset()
		if err := imageio.WritePGM(&b, g, bits); err != nil {
			f.Fatal(err)
		}
		f.Add(b.Bytes())
	}
	f.Add([]byte("P5\n# a comment\n4 4\n65535\n"))
	lim := imageio.Limits{MaxPixels: 1 << 16}
	ts := newServerWith(f, true, func(c *service.Config) { c.MaxPixels = lim.MaxPixels; c.JobTimeout = time.Second })
	ct, body := multipartBody(f, part{"reference", "r.png", "image/png", ref}, part{"params", "", "", []byte(`{"subset": 15}`)})
	req := httptest.NewRequest("POST", "/v1/series", bytes.NewReader(body))
	req.Header.Set("Content-Type", ct)
	rec := httptest.NewRecorder()
	ts.srv.Handler().ServeHTTP(rec, req)
	if rec.Code != 201 {
		f.Fatalf("create series: %d %s", rec.Code, rec.Body)
	}
	sid := decodeJSON[struct{ ID string }](f, rec.Body.Bytes()).ID
	refGray, err := imageio.Decode(bytes.NewReader(ref), lim)
	if err != nil {
		f.Fatal(err)
	}
	f.Fuzz(func(t *testing.T, img []byte) {
		g, err := imageio.Decode(bytes.NewReader(img), lim)
		if err == nil {
			checkHeader(t, img, g)
		}
		// The service takes the image when it decodes to the reference's
		// size and the pair is usable (imageio.CheckPair, as the service
		// checks it).
		usable := err == nil && g.W == 32 && g.H == 32 && imageio.CheckPair(refGray, g, 15) == nil

		ct, body := multipartBody(t, analysisParts(ref, img, `{"subset": 15}`)...)
		req := httptest.NewRequest("POST", "/v1/analyses", bytes.NewReader(body))
		req.Header.Set("Content-Type", ct)
		rec := httptest.NewRecorder()
		ts.srv.Handler().ServeHTTP(rec, req)
		checkAnswer(t, rec)
		if rec.Code != http.StatusTooManyRequests && (rec.Code == http.StatusAccepted) != usable {
			t.Fatalf("analysis: answer %d for an image that decodes with error %v: %s", rec.Code, err, rec.Body)
		}

		req = httptest.NewRequest("POST", "/v1/series/"+sid+"/frames?wait=false", bytes.NewReader(img))
		req.Header.Set("Content-Type", "application/octet-stream")
		rec = httptest.NewRecorder()
		ts.srv.Handler().ServeHTTP(rec, req)
		checkAnswer(t, rec)
		// A PNG frame is checked without inflating it (imageio.CheckPNG),
		// any other frame decoded: the frame is taken only when that check
		// passes with the reference's size, and is not refused when it
		// does; every PNG that decodes passes the check.
		fits := err == nil && g.W == 32 && g.H == 32
		if imageio.IsPNG(img) {
			h, cerr := imageio.CheckPNG(img, lim)
			if fits && cerr != nil {
				t.Fatalf("frame: CheckPNG refuses a PNG that decodes: %v", cerr)
			}
			fits = cerr == nil && h.W == 32 && h.H == 32
		}
		if rec.Code == http.StatusAccepted && !fits || fits && rec.Code/100 == 4 && rec.Code != http.StatusTooManyRequests {
			t.Fatalf("frame: answer %d for an image that decodes with error %v: %s", rec.Code, err, rec.Body)
		}
	})
}

// checkHeader fails unless g, decoded from data, has the size and bit
// depth that the header of data declares, and grey levels within it.
func checkHeader(t *testing.T, data []byte, g *imageio.Gray) {
	t.Helper()
	if bytes.HasPrefix(data, []byte("P5")) {
		checkPGMHeader(t, data, g)
		return
	}
	cfg, format, err := image.DecodeConfig(bytes.NewReader(data))
	if err != nil {
		t.Fatalf("imageio.Decode read an image whose header image.DecodeConfig refuses: %v", err)
	}
	if g.W != cfg.Width || g.H != cfg.Height || len(g.Pix) < g.W*g.H {
		t.Fatalf("%s: decoded %d×%d (%d values), header %d×%d", format, g.W, g.H, len(g.Pix), cfg.Width, cfg.Height)
	}
	bits := 8
	switch cfg.ColorModel {
	case color.Gray16Model, color.RGBA64Model, color.NRGBA64Model:
		bits = 16
	}
	if g.Bits != bits {
		t.Fatalf("%s: decoded with %d bits, the header's colour model %T has %d", format, g.Bits, cfg.ColorModel, bits)
	}
	top := float32(int(1)<<bits - 1)
	for y := 0; y < g.H; y++ {
		for x := 0; x < g.W; x++ {
			if v := g.At(x, y); !(v >= 0 && v <= top) {
				t.Fatalf("%s: grey level %v at (%d, %d) outside 0–%v of %d bits", format, v, x, y, top, bits)
			}
		}
	}
}

// checkPGMHeader checks a decoded binary PGM against its header, read
// here from the format's description (Netpbm pgm(5): "P5", then width,
// height and maxval as ASCII decimals separated by whitespace, "#" starting
// a comment to the end of the line): the size, 8 bits for maxval < 256 and
// 16 otherwise, and every grey level within 0–maxval. Go's image package
// registers no PGM decoder to compare with.
func checkPGMHeader(t *testing.T, data []byte, g *imageio.Gray) {
	t.Helper()
	var v []int
	i := 2
	for len(v) < 3 && i < len(data) {
		switch c := data[i]; {
		case c == '#':
			for i < len(data) && data[i] != '\n' && data[i] != '\r' {
				i++
			}
		case c == ' ' || c == '\t' || c == '\n' || c == '\r' || c == '\v' || c == '\f':
			i++
		case c >= '0' && c <= '9':
			n := 0
			for i < len(data) && data[i] >= '0' && data[i] <= '9' {
				n = min(n*10+int(data[i]-'0'), 1<<30)
				i++
			}
			v = append(v, n)
		default:
			t.Fatalf("pgm: imageio.Decode read a file whose header has %q at byte %d", c, i)
		}
	}
	if len(v) < 3 {
		t.Fatalf("pgm: imageio.Decode read a file whose header holds %d of its 3 numbers", len(v))
	}
	w, h, maxval := v[0], v[1], v[2]
	if g.W != w || g.H != h || len(g.Pix) < g.W*g.H {
		t.Fatalf("pgm: decoded %d×%d (%d values), header %d×%d", g.W, g.H, len(g.Pix), w, h)
	}
	bits := 8
	if maxval > 255 {
		bits = 16
	}
	if g.Bits != bits {
		t.Fatalf("pgm: decoded with %d bits, the header's maxval %d means %d", g.Bits, maxval, bits)
	}
	for y := 0; y < g.H; y++ {
		for x := 0; x < g.W; x++ {
			if v := g.At(x, y); !(v >= 0 && v <= float32(maxval)) {
				t.Fatalf("pgm: grey level %v at (%d, %d) outside 0–%d", v, x, y, maxval)
			}
		}
	}
}

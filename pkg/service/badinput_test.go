package service_test

import (
	"bufio"
	"bytes"
	"encoding/binary"
	"fmt"
	"net"
	"net/http"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/service"
)

// hugeTIFF is a little-endian baseline TIFF whose header declares
// 100000×100000 8-bit grey pixels but carries almost no data (TIFF 6.0
// baseline tags: ImageWidth 256, ImageLength 257, BitsPerSample 258,
// Compression 259, PhotometricInterpretation 262, StripOffsets 273,
// SamplesPerPixel 277, RowsPerStrip 278, StripByteCounts 279).
func hugeTIFF() []byte {
	var b bytes.Buffer
	le := binary.LittleEndian
	b.WriteString("II")
	binary.Write(&b, le, uint16(42))
	binary.Write(&b, le, uint32(8))
	type entry struct {
		tag, typ uint16
		val      uint32
	}
	es := []entry{{256, 4, 100000}, {257, 4, 100000}, {258, 3, 8}, {259, 3, 1}, {262, 3, 1},
		{273, 4, 200}, {277, 3, 1}, {278, 4, 100000}, {279, 4, 16}}
	binary.Write(&b, le, uint16(len(es)))
	for _, e := range es {
		binary.Write(&b, le, e.tag)
		binary.Write(&b, le, e.typ)
		binary.Write(&b, le, uint32(1))
		binary.Write(&b, le, e.val)
	}
	binary.Write(&b, le, uint32(0))
	for b.Len() < 216 {
		b.WriteByte(0)
	}
	return b.Bytes()
}

// TestBadInput sends a list of bad requests; each must get a clear 4xx
// problem naming the input at fault, and the server must stay healthy.
func TestBadInput(t *testing.T) {
	ts := newServer(t, func(c *service.Config) { c.MaxBodyBytes = 200 << 10 })
	ref, def := pair(t, 48, 48, 1, 1, 9)
	_, small := pair(t, 40, 48, 1, 1, 9)
	mp := func(parts ...part) func() (string, []byte) {
		return func() (string, []byte) { return multipartBody(t, parts...) }
	}
	withParams := func(p string) func() (string, []byte) { return mp(analysisParts(ref, def, p)...) }
	cases := []struct {
		name   string
		method string
		path   string
		body   func() (string, []byte)
		status int
		field  string // a field the problem must name ("" = any)
	}{
		{"truncated PNG", "POST", "/v1/analyses", mp(part{"reference", "r.png", "image/png", ref[:len(ref)/2]}, part{"deformed", "d.png", "image/png", def}), 400, "reference"},
		{"huge TIFF header", "POST", "/v1/analyses", mp(part{"reference", "r.png", "image/png", ref}, part{"deformed", "d.tif", "image/tiff", hugeTIFF()}), 413, "deformed"},
		{"not an image", "POST", "/v1/analyses", mp(part{"reference", "r.png", "image/png", []byte("hello, I am text")}, part{"deformed", "d.png", "", def}), 415, "reference"},
		{"mismatched sizes", "POST", "/v1/analyses", mp(part{"reference", "r.png", "image/png", ref}, part{"deformed", "d.png", "image/png", small}), 422, "deformed"},
		{"unknown parameter", "POST", "/v1/analyses", withParams(`{"subset": 15, "colour": "red"}`), 422, "params.colour"},
		{"malformed parameters", "POST", "/v1/analyses", withParams(`{"subset": `), 400, "params"},
		{"wrong parameter type", "POST", "/v1/analyses", withParams(`{"subset": "big"}`), 422, "params.subset"},
		{"subset larger than image", "POST", "/v1/analyses", withParams(`{"subset": 61}`), 422, "params.subset"},
		{"ROI outside image", "POST", "/v1/analyses", withParams(`{"subset": 15, "roi": {"rect": [10, 10, 90, 40]}}`), 422, "params.roi.rect"},
		{"missing part", "POST", "/v1/analyses", mp(part{"reference", "r.png", "image/png", ref}), 400, "deformed"},
		{"params given twice", "POST", "/v1/analyses", mp(append(analysisParts(ref, def, `{"subset": 15}`), part{"params", "", "application/json", []byte(`{}`)})...), 400, "params"},
		{"empty params given twice", "POST", "/v1/analyses", mp(append(analysisParts(ref, def, ""), part{"params", "", "", nil}, part{"params", "", "", nil})...), 400, "params"},
		{"calibration given twice", "POST", "/v1/analyses", mp(append(analysisParts(ref, def, ""), part{"calibration", "c.json", "", []byte(`{}`)}, part{"calibration", "c.json", "", []byte(`{}`)})...), 400, "calibration"},
		{"unknown part", "POST", "/v1/analyses", mp(append(analysisParts(ref, def, ""), part{"extra", "", "", []byte("x")})...), 400, "extra"},
		{"part with wrong content type", "POST", "/v1/analyses", mp(part{"reference", "r.png", "text/plain", ref}, part{"deformed", "d.png", "image/png", def}), 415, "reference"},
		{"wrong content type", "POST", "/v1/analyses", func() (string, []byte) { return "application/json", []byte(`{"reference": "x"}`) }, 415, "Content-Type"},
		{"body too large", "POST", "/v1/analyses", mp(part{"reference", "r.png", "image/png", make([]byte, 300<<10)}, part{"deformed", "d.png", "image/png", def}), 413, ""},
		{"bad wait", "POST", "/v1/analyses?wait=maybe", withParams(`{"subset": 15}`), 400, "wait"},
		{"forged id", "GET", "/v1/analyses/..%2F..%2Fetc", nil, 400, "id"},
		{"forged id in series", "GET", "/v1/series/..%2F..%2Fetc%2Fpasswd/curve.csv", nil, 400, "id"},
		{"well-formed unknown id", "GET", "/v1/analyses/0123456789abcdef0123456789abcdef", nil, 404, ""},
		{"bad list state", "GET", "/v1/analyses?state=lost", nil, 400, "state"},
		{"unknown route", "GET", "/v1/nothing", nil, 404, ""},
		{"wrong method", "PUT", "/v1/analyses", nil, 405, ""},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var ct string
			var body []byte
			if c.body != nil {
				ct, body = c.body()
			}
			resp, b := ts.do(t, c.method, c.path, ct, body)
			if resp.StatusCode != c.status {
				t.Fatalf("%s %s: %d, want %d: %s", c.method, c.path, resp.StatusCode, c.status, b)
			}
			if got := resp.Header.Get("Content-Type"); got != "application/problem+json" {
				t.Errorf("Content-Type %q", got)
			}
			p := decodeJSON[problemDoc](t, b)
			if p.Status != c.status || p.Title == "" || p.Detail == "" || !strings.HasPrefix(p.Type, "urn:mottle:problem:") {
				t.Errorf("problem %+v", p)
			}
			if c.field != "" {
				found := false
				for _, f := range p.Errors {
					found = found || f.Field == c.field && f.Detail != ""
				}
				if !found {
					t.Errorf("problem does not name field %q: %s", c.field, b)
				}
			}
		})
	}
	// Raw paths with dot segments, sent as they are (no client cleaning).
	for _, raw := range []string{"/v1/analyses/../../etc/passwd", "/v1/series/../../../etc/frames/0/field.json"} {
		conn, err := net.Dial("tcp", ts.Listener.Addr().String())
		if err != nil {
			t.Fatal(err)
		}
		fmt.Fprintf(conn, "GET %s HTTP/1.1\r\nHost: x\r\nConnection: close\r\n\r\n", raw)
		resp, err := http.ReadResponse(bufio.NewReader(conn), nil)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		conn.Close()
		if resp.StatusCode < 400 || resp.StatusCode >= 500 {
			t.Errorf("GET %s: %d, want 4xx", raw, resp.StatusCode)
		}
	}
	// Still healthy and still working.
	if resp, _ := ts.do(t, "GET", "/healthz", "", nil); resp.StatusCode != 200 {
		t.Errorf("healthz %d", resp.StatusCode)
	}
	ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 15}`)...)
	resp, b := ts.do(t, "POST", "/v1/analyses?wait=true", ct, body)
	if resp.StatusCode != 200 || decodeJSON[jobDoc](t, b).State != "succeeded" {
		t.Errorf("good request after bad ones: %d %s", resp.StatusCode, b)
	}
}

func TestPointsLimit(t *testing.T) {
	ts := newServer(t, func(c *service.Config) { c.MaxPoints = 100 })
	ref, def := pair(t, 48, 48, 1, 1, 9)
	ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 15, "step": 2}`)...)
	resp, b := ts.do(t, "POST", "/v1/analyses", ct, body)
	if resp.StatusCode != 422 || !strings.Contains(string(b), `"params.step"`) {
		t.Errorf("%d %s, want 422 naming params.step", resp.StatusCode, b)
	}
}

func TestAuth(t *testing.T) {
	const token = "s3cret-token-0123456789"
	ts := newServer(t, func(c *service.Config) { c.Tokens = []string{"another-token-abcdefgh", token} })
	get := func(path, auth string) int {
		req, _ := http.NewRequest("GET", ts.URL+path, nil)
		if auth != "" {
			req.Header.Set("Authorization", auth)
		}
		resp, err := ts.client().Do(req)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		if resp.StatusCode == 401 && resp.Header.Get("WWW-Authenticate") == "" {
			t.Errorf("401 on %s without WWW-Authenticate", path)
		}
		return resp.StatusCode
	}
	for _, c := range []struct {
		path, auth string
		want       int
	}{
		{"/healthz", "", 200},
		{"/readyz", "", 200},
		{"/v1/analyses", "", 401},
		{"/metrics", "", 401},
		{"/v1/openapi.json", "", 401},
		{"/v1/analyses", "Bearer wrong-token-0123456789", 401},
		{"/v1/analyses", "Basic " + token, 401},
		{"/v1/analyses", "Bearer " + token, 200},
		{"/metrics", "Bearer another-token-abcdefgh", 200},
	} {
		if got := get(c.path, c.auth); got != c.want {
			t.Errorf("GET %s with %q: %d, want %d", c.path, c.auth, got, c.want)
		}
	}
	if _, err := service.New(service.Config{Backend: ts.srv2Backend(t), Analyzer: &fakeAnalyzer{}, Tokens: []string{"short"}}); err == nil {
		t.Error("a 5-character token was accepted")
	}
}

func TestCORS(t *testing.T) {
	for _, origins := range [][]string{nil, {"http://lab.example"}} {
		ts := newServer(t, func(c *service.Config) { c.CORSOrigins = origins })
		req, _ := http.NewRequest("OPTIONS", ts.URL+"/v1/analyses", nil)
		req.Header.Set("Origin", "http://lab.example")
		req.Header.Set("Access-Control-Request-Method", "POST")
		resp, err := ts.client().Do(req)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		got := resp.Header.Get("Access-Control-Allow-Origin")
		if origins == nil && got != "" {
			t.Errorf("CORS header %q sent though none configured", got)
		}
		if origins != nil && (got != "http://lab.example" || resp.StatusCode != 204) {
			t.Errorf("preflight: %d %q", resp.StatusCode, got)
		}
		req, _ = http.NewRequest("GET", ts.URL+"/v1/analyses", nil)
		req.Header.Set("Origin", "http://elsewhere.example")
		resp, _ = ts.client().Do(req)
		resp.Body.Close()
		if h := resp.Header.Get("Access-Control-Allow-Origin"); h != "" {
			t.Errorf("origin not configured got %q", h)
		}
	}
}

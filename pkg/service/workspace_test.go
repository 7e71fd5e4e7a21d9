package service_test

import (
	"bytes"
	"image/png"
	"net/http"
	"net/url"
	"strings"
	"testing"
)

// TestNamesThumbsReport covers the routes of the browser workspace: a name
// given at creation (or the default from the file names), renaming, the
// list carrying the name, thumbnails that fit 160×120, and a series'
// properties and report.
func TestNamesThumbsReport(t *testing.T) {
	ts := newServer(t, nil)
	ref, def := pair(t, 200, 100, 1, 0, 5)
	ct, body := multipartBody(t, analysisParts(ref, def, "")...)
	resp, b := ts.do(t, "POST", "/v1/analyses?wait=true&name="+url.QueryEscape("Coupon A3"), ct, body)
	if resp.StatusCode != 200 {
		t.Fatalf("POST: %d %s", resp.StatusCode, b)
	}
	a := decodeJSON[struct{ ID, Name string }](t, b)
	if a.Name != "Coupon A3" {
		t.Errorf("name %q, want Coupon A3", a.Name)
	}
	ct, body = multipartBody(t, analysisParts(ref, def, "")...)
	_, b = ts.do(t, "POST", "/v1/analyses?wait=true", ct, body)
	if n := decodeJSON[struct{ Name string }](t, b).Name; n != "ref.png → def.png" {
		t.Errorf("default name %q, want the file names", n)
	}

	for _, tc := range []struct {
		body string
		code int
		name string
	}{
		{`{"name": "  Coupon A3, second pull "}`, 200, "Coupon A3, second pull"},
		{`{"name": "a\u0007b"}`, 400, ""},
		{`{"label": "x"}`, 400, ""},
		{`{"name": "` + strings.Repeat("x", 201) + `"}`, 400, ""},
		{`not json`, 400, ""},
	} {
		resp, b := ts.do(t, "PATCH", "/v1/analyses/"+a.ID, "application/json", []byte(tc.body))
		if resp.StatusCode != tc.code {
			t.Errorf("PATCH %s: %d %s, want %d", tc.body, resp.StatusCode, b, tc.code)
			continue
		}
		if tc.code == 200 {
			if n := decodeJSON[struct{ Name string }](t, b).Name; n != tc.name {
				t.Errorf("PATCH %s: name %q, want %q", tc.body, n, tc.name)
			}
		}
	}
	_, b = ts.do(t, "GET", "/v1/analyses", "", nil)
	if !bytes.Contains(b, []byte(`"name": "Coupon A3, second pull"`)) {
		t.Errorf("list lacks the new name: %s", b)
	}
	if resp, _ := ts.do(t, "POST", "/v1/analyses?name=%07", ct, body); resp.StatusCode != 400 {
		t.Errorf("control character in ?name: %d, want 400", resp.StatusCode)
	}

	thumb := func(path string) {
		t.Helper()
		resp, b := ts.do(t, "GET", path, "", nil)
		if resp.StatusCode != 200 || resp.Header.Get("Content-Type") != "image/png" {
			t.Fatalf("GET %s: %d %s", path, resp.StatusCode, resp.Header.Get("Content-Type"))
		}
		img, err := png.Decode(bytes.NewReader(b))
		if err != nil {
			t.Fatalf("GET %s: %v", path, err)
		}
		// 200×100 fitted into 160×120 keeps the aspect ratio: 160×80.
		if r := img.Bounds(); r.Dx() != 160 || r.Dy() != 80 {
			t.Errorf("GET %s: %v, want 160×80", path, r)
		}
	}
	thumb("/v1/analyses/" + a.ID + "/thumb.png")

	ct, body = multipartBody(t, part{"reference", "ref_000.png", "image/png", ref})
	resp, b = ts.do(t, "POST", "/v1/series", ct, body)
	if resp.StatusCode != http.StatusCreated {
		t.Fatalf("POST /v1/series: %d %s", resp.StatusCode, b)
	}
	sr := decodeJSON[struct{ ID, Name string }](t, b)
	if sr.Name != "ref_000.png" {
		t.Errorf("series default name %q, want ref_000.png", sr.Name)
	}
	resp, b = ts.do(t, "PATCH", "/v1/series/"+sr.ID, "application/json", []byte(`{"name": "Strip B7"}`))
	if resp.StatusCode != 200 || decodeJSON[struct{ Name string }](t, b).Name != "Strip B7" {
		t.Errorf("PATCH series: %d %s", resp.StatusCode, b)
	}
	thumb("/v1/series/" + sr.ID + "/thumb.png")
	resp, b = ts.do(t, "GET", "/v1/series/"+sr.ID+"/properties.json", "", nil)
	if resp.StatusCode != 200 || !bytes.Contains(b, []byte("no axial extensometer defined")) {
		t.Errorf("properties: %d %s", resp.StatusCode, b)
	}
	resp, b = ts.do(t, "GET", "/v1/series/"+sr.ID+"/report.html", "", nil)
	if resp.StatusCode != 200 || !strings.HasPrefix(resp.Header.Get("Content-Type"), "text/html") || !bytes.Contains(b, []byte("<title>Strip B7</title>")) {
		t.Errorf("report: %d %s %.300s", resp.StatusCode, resp.Header.Get("Content-Type"), b)
	}
}

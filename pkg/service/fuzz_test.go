package service_test

import (
	"bytes"
	"net/http"
	"net/http/httptest"
	"testing"
	"time"

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

// FuzzParams submits a valid pair with fuzzed parameter JSON.
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
	})
}

// FuzzImage submits a fuzzed deformed image, through the multipart path
// and as a raw series frame.
func FuzzImage(f *testing.F) {
	ref, def := pair(f, 32, 32, 1, 0, 22)
	f.Add(def)
	f.Add(def[:len(def)/3])
	f.Add(hugeTIFF())
	f.Add([]byte("BM\x00\x00"))
	f.Add([]byte("\xff\xd8\xff\xe0"))
	ts := newServerWith(f, true, func(c *service.Config) { c.MaxPixels = 1 << 16; c.JobTimeout = time.Second })
	ct, body := multipartBody(f, part{"reference", "r.png", "image/png", ref}, part{"params", "", "", []byte(`{"subset": 15}`)})
	req := httptest.NewRequest("POST", "/v1/series", bytes.NewReader(body))
	req.Header.Set("Content-Type", ct)
	rec := httptest.NewRecorder()
	ts.srv.Handler().ServeHTTP(rec, req)
	if rec.Code != 201 {
		f.Fatalf("create series: %d %s", rec.Code, rec.Body)
	}
	sid := decodeJSON[struct{ ID string }](f, rec.Body.Bytes()).ID
	f.Fuzz(func(t *testing.T, img []byte) {
		ct, body := multipartBody(t, analysisParts(ref, img, `{"subset": 15}`)...)
		req := httptest.NewRequest("POST", "/v1/analyses", bytes.NewReader(body))
		req.Header.Set("Content-Type", ct)
		rec := httptest.NewRecorder()
		ts.srv.Handler().ServeHTTP(rec, req)
		checkAnswer(t, rec)

		req = httptest.NewRequest("POST", "/v1/series/"+sid+"/frames?wait=false", bytes.NewReader(img))
		req.Header.Set("Content-Type", "application/octet-stream")
		rec = httptest.NewRecorder()
		ts.srv.Handler().ServeHTTP(rec, req)
		checkAnswer(t, rec)
	})
}

package service

import (
	"bytes"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service/embedded"
)

// TestImageCheckBusy checks that image checks beyond the server's worker count
// are answered 429 with Retry-After instead of piling up on request
// goroutines (the same load rule as the job queue).
func TestImageCheckBusy(t *testing.T) {
	be, err := embedded.Open(t.TempDir(), 4)
	if err != nil {
		t.Fatal(err)
	}
	defer be.Close()
	s, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: 2, Logger: slog.New(slog.NewJSONHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	g := imageio.NewGray(32, 32)
	for k := range g.Pix {
		g.Pix[k] = float32(k % 251)
	}
	var png bytes.Buffer
	if err := imageio.WritePNG(&png, g, 8); err != nil {
		t.Fatal(err)
	}
	post := func() *httptest.ResponseRecorder {
		req := httptest.NewRequest("POST", "/v1/images/check", bytes.NewReader(png.Bytes()))
		req.Header.Set("Content-Type", "image/png")
		rec := httptest.NewRecorder()
		s.Handler().ServeHTTP(rec, req)
		return rec
	}
	if rec := post(); rec.Code != http.StatusOK {
		t.Fatalf("idle server: %d %s", rec.Code, rec.Body)
	}
	s.checking <- struct{}{}
	s.checking <- struct{}{}
	rec := post()
	if rec.Code != http.StatusTooManyRequests || rec.Header().Get("Retry-After") == "" {
		t.Errorf("busy server: %d, Retry-After %q; want 429 with Retry-After", rec.Code, rec.Header().Get("Retry-After"))
	}
	<-s.checking
	if rec := post(); rec.Code != http.StatusOK {
		t.Errorf("after a slot freed: %d %s", rec.Code, rec.Body)
	}
}

package service

import (
	"net/http"
	"net/http/httptest"
	"testing"
)

// bareWriter wraps a ResponseWriter with no Flush or Hijack of its own,
// only Unwrap, as another middleware or a test's recorder might.
type bareWriter struct{ w http.ResponseWriter }

func (b bareWriter) Header() http.Header         { return b.w.Header() }
func (b bareWriter) Write(p []byte) (int, error) { return b.w.Write(p) }
func (b bareWriter) WriteHeader(code int)        { b.w.WriteHeader(code) }
func (b bareWriter) Unwrap() http.ResponseWriter { return b.w }

// TestStatusWriterFlushesThroughWrappers checks that a flush of the
// logging writer reaches the connection's writer through a wrapper that
// has no Flush itself (http.ResponseController follows Unwrap, net/http
// documentation of NewResponseController): before, the flush stopped at
// the wrapper, and an event stream behind it stalled.
func TestStatusWriterFlushesThroughWrappers(t *testing.T) {
	rec := httptest.NewRecorder()
	sw := &statusWriter{ResponseWriter: bareWriter{rec}}
	if _, err := sw.Write([]byte("data: 1\n\n")); err != nil {
		t.Fatal(err)
	}
	sw.Flush()
	if !rec.Flushed {
		t.Fatal("Flush did not reach the recorder behind a wrapper without Flush")
	}
	if sw.status != http.StatusOK || sw.bytes != 9 {
		t.Fatalf("recorded status %d, %d bytes; want 200, 9", sw.status, sw.bytes)
	}
	// A recorder cannot hand over a connection: the error says so instead
	// of a panic or a nil connection without an error.
	if c, _, err := sw.Hijack(); err == nil || c != nil {
		t.Fatalf("Hijack of a recorder: conn %v, err %v; want an error", c, err)
	}
}

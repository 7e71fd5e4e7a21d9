package service

import (
	"bufio"
	"context"
	"crypto/rand"
	"crypto/sha256"
	"crypto/subtle"
	"encoding/hex"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"runtime/debug"
	"slices"
	"time"

	"github.com/go-chi/chi/v5"
)

type ctxKey int

const (
	keyRequestID ctxKey = iota
	keyLogger
)

func requestID(ctx context.Context) string {
	s, _ := ctx.Value(keyRequestID).(string)
	return s
}

func logger(ctx context.Context) *slog.Logger {
	l, _ := ctx.Value(keyLogger).(*slog.Logger)
	return l
}

// validRequestID accepts a caller's X-Request-Id of 1–64 characters from
// [A-Za-z0-9._-]; others are replaced so logs cannot be forged.
func validRequestID(s string) bool {
	if len(s) == 0 || len(s) > 64 {
		return false
	}
	for _, c := range []byte(s) {
		if !('0' <= c && c <= '9' || 'a' <= c && c <= 'z' || 'A' <= c && c <= 'Z' || c == '-' || c == '_' || c == '.') {
			return false
		}
	}
	return true
}

// statusWriter records the status and size of a response. It keeps
// Flush and Unwrap so server-sent events and http.ResponseController work.
type statusWriter struct {
	http.ResponseWriter
	status int
	bytes  int64
}

func (w *statusWriter) WriteHeader(code int) {
	if w.status == 0 {
		w.status = code
	}
	w.ResponseWriter.WriteHeader(code)
}

func (w *statusWriter) Write(b []byte) (int, error) {
	if w.status == 0 {
		w.status = http.StatusOK
	}
	n, err := w.ResponseWriter.Write(b)
	w.bytes += int64(n)
	return n, err
}

// Flush sends what has been written so far. It goes through
// http.ResponseController, which follows Unwrap, so a writer wrapped in
// another that has no Flush of its own (a test's recorder, another
// middleware) is still flushed: event streams must not stall there.
func (w *statusWriter) Flush() {
	_ = http.NewResponseController(w.ResponseWriter).Flush()
}

// Hijack hands the connection over, through http.ResponseController as
// Flush does.
func (w *statusWriter) Hijack() (net.Conn, *bufio.ReadWriter, error) {
	c, rw, err := http.NewResponseController(w.ResponseWriter).Hijack()
	if err != nil {
		return nil, nil, fmt.Errorf("hijack: %w", err)
	}
	return c, rw, nil
}

func (w *statusWriter) Unwrap() http.ResponseWriter { return w.ResponseWriter }

// observe assigns the request id, logs the request and records its latency.
func (s *Server) observe(next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		start := time.Now()
		id := r.Header.Get("X-Request-Id")
		if !validRequestID(id) {
			var b [8]byte
			_, _ = rand.Read(b[:])
			id = hex.EncodeToString(b[:])
		}
		l := s.log.With("request_id", id)
		ctx := context.WithValue(r.Context(), keyRequestID, id)
		ctx = context.WithValue(ctx, keyLogger, l)
		w.Header().Set("X-Request-Id", id)
		sw := &statusWriter{ResponseWriter: w}
		defer func() {
			if v := recover(); v != nil {
				if v == http.ErrAbortHandler {
					panic(v)
				}
				l.Error("panic", "error", fmt.Sprint(v), "stack", string(debug.Stack()))
				if sw.status == 0 {
					writeProblem(sw, r.WithContext(ctx), problem(http.StatusInternalServerError, "internal", "Internal error", "the server hit a bug; the request id identifies it in the logs"))
				}
			}
			status := sw.status
			if status == 0 {
				status = http.StatusOK
			}
			route := "unmatched"
			if rc := chi.RouteContext(ctx); rc != nil && rc.RoutePattern() != "" {
				route = rc.RoutePattern()
			}
			d := time.Since(start)
			s.metrics.observeRequest(r.Method, route, status, d)
			l.Info("request", "method", r.Method, "path", r.URL.Path, "route", route,
				"status", status, "bytes", sw.bytes, "duration_ms", float64(d.Microseconds())/1000,
				"remote", r.RemoteAddr)
		}()
		next.ServeHTTP(sw, r.WithContext(ctx))
	})
}

// cors answers preflight requests and adds CORS headers for the
// configured origins; with none configured it does nothing.
func (s *Server) cors(next http.Handler) http.Handler {
	if len(s.cfg.CORSOrigins) == 0 {
		return next
	}
	any := slices.Contains(s.cfg.CORSOrigins, "*")
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		origin := r.Header.Get("Origin")
		if origin != "" && (any || slices.Contains(s.cfg.CORSOrigins, origin)) {
			h := w.Header()
			h.Set("Access-Control-Allow-Origin", origin)
			h.Add("Vary", "Origin")
			h.Set("Access-Control-Expose-Headers", "Location, Retry-After, X-Request-Id")
			if r.Method == http.MethodOptions && r.Header.Get("Access-Control-Request-Method") != "" {
				h.Set("Access-Control-Allow-Methods", "GET, POST, PATCH, DELETE, OPTIONS")
				h.Set("Access-Control-Allow-Headers", "Authorization, Content-Type, Idempotency-Key, X-Mottle-Project, X-Request-Id")
				h.Set("Access-Control-Max-Age", "600")
				w.WriteHeader(http.StatusNoContent)
				return
			}
		}
		next.ServeHTTP(w, r)
	})
}

// legacyToken reports whether token is one of Config.Tokens. Tokens are
// compared through their SHA-256 digests with subtle.ConstantTimeCompare,
// against every configured token, so the time taken says nothing about a
// token.
func (s *Server) legacyToken(token string) bool {
	sum := sha256.Sum256([]byte(token))
	match := 0
	for _, t := range s.tokens {
		match |= subtle.ConstantTimeCompare(sum[:], t[:])
	}
	return match == 1
}

package service

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net/http"
	"os"
	"time"
)

// errTooSlow is a request body that arrived below Config.MinBodyRate.
var errTooSlow = errors.New("request body arrived too slowly")

// rateBody is a request body that must arrive at least at rate bytes a
// second after a grace period: before each read the connection's read
// deadline is set to the time by which the next byte is due, so that a
// client trickling a body (or stopping part way) is cut off within the
// rule, not only at the whole-request ReadTimeout, which still bounds it.
type rateBody struct {
	io.ReadCloser
	rc    *http.ResponseController
	start time.Time
	end   time.Time // the ReadTimeout of the request
	grace time.Duration
	rate  float64
	n     int64
	// cut is the error of the read that was cut off, if one was.
	cut error
}

func (b *rateBody) Read(p []byte) (int, error) {
	due := b.start.Add(b.grace + time.Duration(float64(b.n+1)/b.rate*float64(time.Second)))
	if due.After(b.end) {
		due = b.end
	}
	_ = b.rc.SetReadDeadline(due)
	n, err := b.ReadCloser.Read(p)
	b.n += int64(n)
	if errors.Is(err, io.EOF) {
		// The whole body is in: back to the request's own deadline, so
		// that the server's watch for a closed connection is not cut off
		// while the handler works.
		_ = b.rc.SetReadDeadline(b.end)
	}
	if err != nil && errors.Is(err, os.ErrDeadlineExceeded) {
		b.cut = fmt.Errorf("%w: %d bytes in %.1f s, below the minimum of %.0f KiB/s after %v (the connection is closed); send from a faster link or ask the operator for a lower --min-upload-rate",
			errTooSlow, b.n, time.Since(b.start).Seconds(), b.rate/1024, b.grace)
		return n, b.cut
	}
	return n, err
}

// limitRate puts the minimum-rate rule on the body of r.
func (s *Server) limitRate(w http.ResponseWriter, r *http.Request) *http.Request {
	if s.cfg.MinBodyRate <= 0 || r.Body == nil || r.Body == http.NoBody || r.ContentLength == 0 {
		return r
	}
	now := time.Now()
	rb := &rateBody{ReadCloser: r.Body, rc: http.NewResponseController(w), start: now,
		end: now.Add(s.cfg.ReadTimeout), grace: s.cfg.BodyRateGrace, rate: float64(s.cfg.MinBodyRate)}
	r = r.WithContext(context.WithValue(r.Context(), rateKey{}, rb))
	r.Body = rb
	return r
}

type rateKey struct{}

// slowErr returns the 408 problem when r's body was cut off for its rate
// (a parser reading it may have reported only what it saw, such as a
// header cut short), and err otherwise.
func slowErr(r *http.Request, err error) error {
	if rb, ok := r.Context().Value(rateKey{}).(*rateBody); ok && rb.cut != nil {
		return slowProblem(rb.cut, "body")
	}
	return err
}

// slowProblem is the answer to a body cut off for its rate.
func slowProblem(err error, field string) *Problem {
	return problem(http.StatusRequestTimeout, "body-too-slow", "Request body too slow", err.Error(),
		FieldProblem{field, "arrived below the minimum rate"})
}

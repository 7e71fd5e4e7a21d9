package service

import (
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"strconv"
	"strings"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// Problem is an RFC 9457 problem document ("application/problem+json").
type Problem struct {
	// Type is a URI naming the kind of problem, "urn:mottle:problem:<slug>".
	Type   string `json:"type"`
	Title  string `json:"title"`
	Status int    `json:"status"`
	Detail string `json:"detail,omitempty"`
	// Instance is the request path.
	Instance string `json:"instance,omitempty"`
	// Errors lists field-level problems: which input, what to change.
	Errors []FieldProblem `json:"errors,omitempty"`
	// RequestID is the id of the request in the server's logs.
	RequestID string `json:"request_id,omitempty"`
	// Job is the id of the job concerned, if any.
	Job string `json:"job,omitempty"`
	// State is the job's state, for problems about a job not being ready.
	State jobs.State `json:"state,omitempty"`
}

// FieldProblem is one problem with one input.
type FieldProblem struct {
	// Field names the input: a multipart part ("reference"), a query
	// parameter ("quantity"), or a parameter ("params.subset").
	Field string `json:"field"`
	// Detail says what is wrong and what would work.
	Detail string `json:"detail"`
}

func problem(status int, slug, title, detail string, fields ...FieldProblem) *Problem {
	return &Problem{Type: "urn:mottle:problem:" + slug, Title: title, Status: status, Detail: detail, Errors: fields}
}

// Error returns "title: detail", so a Problem can travel as an error.
func (p *Problem) Error() string { return p.Title + ": " + p.Detail }

// writeProblem answers with p, filling in the instance and request id.
func writeProblem(w http.ResponseWriter, r *http.Request, p *Problem) {
	p.Instance = r.URL.Path
	p.RequestID = requestID(r.Context())
	h := w.Header()
	h.Set("Content-Type", "application/problem+json")
	h.Set("X-Content-Type-Options", "nosniff")
	w.WriteHeader(p.Status)
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	_ = enc.Encode(p)
	if l := logger(r.Context()); l != nil && p.Status >= 500 {
		l.Error("server error", "status", p.Status, "title", p.Title, "detail", p.Detail)
	}
}

// asProblem turns an error from parsing, decoding or the backend into a
// problem document.
func asProblem(err error, field string) *Problem {
	var p *Problem
	if errors.As(err, &p) {
		return p
	}
	var fe *FieldError
	if errors.As(err, &fe) {
		st := fe.Status
		if st == 0 {
			st = http.StatusUnprocessableEntity
		}
		return problem(st, "invalid-input", "Invalid input", fe.Error(), FieldProblem{fe.Field, fe.Detail})
	}
	var ve *analysis.ValidationError
	if errors.As(err, &ve) {
		fields := make([]FieldProblem, len(ve.Problems))
		for i, q := range ve.Problems {
			fields[i] = FieldProblem{Field: "params." + q.Field, Detail: q.Message}
		}
		return problem(http.StatusUnprocessableEntity, "invalid-parameters", "Invalid parameters",
			fmt.Sprintf("%d parameter problem(s); see errors", len(fields)), fields...)
	}
	if isNoSpace(err) {
		return noSpaceProblem(err)
	}
	var mbe *http.MaxBytesError
	if errors.As(err, &mbe) {
		return problem(http.StatusRequestEntityTooLarge, "body-too-large", "Request body too large",
			fmt.Sprintf("the body exceeds the limit of %d bytes; send smaller images or ask the operator to raise --max-body", mbe.Limit),
			FieldProblem{field, "over the body size limit"})
	}
	switch {
	case errors.Is(err, imageio.ErrTooLarge):
		return problem(http.StatusRequestEntityTooLarge, "image-too-large", "Image too large", err.Error(), FieldProblem{field, err.Error()})
	case errors.Is(err, imageio.ErrFormat):
		return problem(http.StatusUnsupportedMediaType, "unsupported-image", "Unsupported image format", err.Error(), FieldProblem{field, "send PNG, TIFF, JPEG or BMP"})
	case errors.Is(err, imageio.ErrCorrupt):
		return problem(http.StatusBadRequest, "corrupt-image", "Corrupt or truncated image", err.Error(), FieldProblem{field, err.Error()})
	case errors.Is(err, imageio.ErrSizeMismatch), errors.Is(err, imageio.ErrTooSmall), errors.Is(err, imageio.ErrNoContrast):
		return problem(http.StatusUnprocessableEntity, "unusable-images", "Images cannot be correlated", err.Error(), imageFieldProblems(err, field)...)
	case errors.Is(err, jobs.ErrNotFound):
		return problem(http.StatusNotFound, "not-found", "Not found", "no such resource; it may have been deleted or removed by the retention policy")
	case errors.Is(err, jobs.ErrQueueFull):
		return problem(http.StatusTooManyRequests, "queue-full", "Queue full", "the job queue is full; retry after the time in Retry-After")
	}
	return problem(http.StatusInternalServerError, "internal", "Internal error", err.Error())
}

// imageFieldProblems splits a joined image check error into one field
// problem per image it names.
func imageFieldProblems(err error, field string) []FieldProblem {
	var list []error
	if u, ok := err.(interface{ Unwrap() []error }); ok {
		list = u.Unwrap()
	} else {
		list = []error{err}
	}
	var out []FieldProblem
	for _, e := range list {
		f := field
		msg := e.Error()
		for _, name := range []string{"reference", "deformed"} {
			if strings.HasPrefix(msg, name+" ") {
				f = name
			}
		}
		if errors.Is(e, imageio.ErrSizeMismatch) {
			f = "deformed"
		}
		out = append(out, FieldProblem{Field: f, Detail: msg})
	}
	return out
}

// retryAfter sets the Retry-After header in whole seconds (at least 1).
func retryAfter(w http.ResponseWriter, secs float64) {
	n := int(secs + 0.999)
	if n < 1 {
		n = 1
	}
	w.Header().Set("Retry-After", strconv.Itoa(n))
}

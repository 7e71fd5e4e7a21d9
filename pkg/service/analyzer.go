package service

import (
	"context"
	"fmt"
	"io"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// Analyzer computes one analysis and renders maps from its stored results.
// Implementations must be safe for concurrent use and deterministic: the
// same input gives the same result files, whatever the scheduling.
type Analyzer interface {
	// Run correlates in.Ref and in.Def with in.Params, reporting progress
	// (grid points done out of total) from time to time, and returns the
	// result files and a summary. It stops early with ctx.Err() when ctx
	// is done.
	Run(ctx context.Context, in Input, progress func(done, total int)) (*Result, error)
	// Map renders a PNG map of req.Quantity from the stored results of one
	// job (open opens a result file by name, e.g. "field.json") over bg,
	// the reference or deformed image as req.On asks. An unknown quantity
	// or a bad range is a *FieldError.
	Map(ctx context.Context, open func(name string) (io.ReadCloser, error), req MapRequest, bg *imageio.Gray) ([]byte, error)
}

// Input is what one analysis job computes from.
type Input struct {
	Ref, Def *imageio.Gray
	// Mask, if not nil, marks the pixels to analyse (non-zero = inside),
	// intersected with Params.ROI.
	Mask   *imageio.Gray
	Params analysis.Params
}

// Result is what an analysis produced.
type Result struct {
	// Files holds each result file by name: "field.json", "field.csv",
	// "field.vts", "field.npz", and "arrays/<quantity>.npy" for each
	// quantity. The service serves them as they are.
	Files   map[string][]byte
	Summary jobs.Summary
}

// MapRequest asks for a PNG map of one quantity.
type MapRequest struct {
	Quantity string
	// Range is the colour-scale range; nil picks it from the data.
	Range *[2]float64
	// On is "reference" (points at X) or "deformed" (points at x = X + u).
	On string
}

// FieldError is a problem with one named input of a request (a query
// parameter, a multipart part, a parameter). Handlers answer it with a 4xx
// problem document whose field-level detail names Field.
type FieldError struct {
	Field  string
	Detail string
	// Status is the HTTP status to answer with; 0 means 422.
	Status int
}

func (e *FieldError) Error() string { return fmt.Sprintf("%s: %s", e.Field, e.Detail) }

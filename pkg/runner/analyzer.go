package runner

import (
	"context"
	"encoding/json"
	"fmt"
	"io"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
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
	// Orientation is the EXIF orientation Ref and Def were turned by (the
	// reference's); results record it when it is not upright.
	Orientation imageio.Orientation
	// Formats are the result formats to write (results.ParseFormats); ""
	// means the service's default, the stored result alone.
	Formats string
	// RefMeasures, if not nil, returns the reference's image quality
	// measures from an earlier job on the same reference pixels,
	// parameters and mask (the runner keeps them, see Result.RefMeasures),
	// or nil; an Analyzer may use them instead of measuring the reference
	// again. The look-up hashes the reference's pixels: an Analyzer calls
	// it beside its correlation, not before. It is safe for concurrent use.
	RefMeasures func() *quality.Measures
	// Threads, if above 0, is the thread count to compute with instead of
	// Params.Threads, which the results record (they never depend on it).
	Threads int
}

// Result is what an analysis produced.
type Result struct {
	// Files holds each result file by name: "field.json", "field.csv",
	// "field.vts", "field.npz", and "arrays/<quantity>.npy" for each
	// quantity. The service serves them as they are.
	Files   map[string][]byte
	Summary jobs.Summary
	// State is the series engine's state after a frame (FrameAnalyzer
	// only): an opaque document the service stores and hands back with the
	// next frame.
	State []byte
	// RefMeasures, if not nil, are the reference's quality measures
	// (quality.Measure), which the runner hands to later jobs of the same
	// reference as Input.RefMeasures.
	RefMeasures *quality.Measures

	stateFrom string // the key of the state the frame continued from
}

// FrameAnalyzer is an Analyzer that also tracks the frames of a series
// with a stateful series engine. The service runs the frames of one series
// one at a time, in order, and keeps the state between them; an Analyzer
// without this method gets every frame as an independent pair with the
// series reference.
type FrameAnalyzer interface {
	Analyzer
	// Frame adds in.Def to the series whose state after the previous
	// frame is in.State (nil for the first frame) and returns the frame's
	// result files, its summary and the new state in Result.State. It
	// stops early with ctx.Err() when ctx is done.
	Frame(ctx context.Context, in FrameInput) (*Result, error)
}

// FrameInput is what one series frame is computed from.
type FrameInput struct {
	// Ref is the series reference; Last the last frame added before this
	// one (nil for the first frame); Def the frame itself.
	Ref, Last, Def *imageio.Gray
	// LoadLast, when Last is nil, loads the last frame added before this
	// one, if the engine needs it (series.RestoreLoading: a frame of a
	// direct-mode series added from its solution does not).
	LoadLast func() (*imageio.Gray, error)
	// Orientation is the EXIF orientation the images were turned by (the
	// series reference's).
	Orientation imageio.Orientation
	// Params is the series' stored parameter document.
	Params json.RawMessage
	// State is the engine state after Last, nil for the first frame.
	State []byte
	// StateSolution reads the solution of the frame State was made after,
	// which holds its points when State names it (series.DecodeStateWith).
	StateSolution func() ([]byte, error)
	// StateJSON asks for the new state (Result.State) as JSON rather than
	// in the engine's binary form (Config.StateJSON). In the binary form,
	// a frame added from its solution (Solved) stores a state that names
	// the solution instead of holding its points (series.StateBinaryRef);
	// the runner keeps the solution while that state is the series' last.
	StateJSON bool
	// Formats are the result formats to write, as for Input.
	Formats string
	// Name, Time and Load describe the frame; RefName names the reference.
	Name, RefName string
	Time, Load    *float64
	// Threads caps the worker goroutines of the correlation (0 = all cores).
	Threads int
	// Mask, if not nil, is the series' ROI mask image (non-zero = inside,
	// intersected with the parameters' ROI). The engine needs it for the
	// first frame; later frames find it in State.
	Mask *imageio.Gray
	// Progress, if not nil, is called with the point correlations done and
	// the number known so far (the total may grow when a frame takes
	// another pass; done never decreases).
	Progress func(done, total int)
	// Solved, if not nil, is the frame's solution from FrameSolver.Solve,
	// computed before its predecessor finished; the engine uses it when it
	// would correlate the frame directly and the solution converged.
	Solved []byte
}

// FrameSolver is a FrameAnalyzer that can also correlate a frame of a
// series before the frames ahead of it are done: in direct (total) mode a
// frame is correlated with the reference, so the order of the frames only
// supplies initial guesses. The runner solves such frames side by side
// and then adds them to the series state in frame order with
// FrameInput.Solved.
type FrameSolver interface {
	FrameAnalyzer
	// SolvesAhead reports whether the frames of a series with the stored
	// parameter document params may be solved ahead; with incremental,
	// when the last frame finished went incremental (a frame solved then
	// may return to direct correlation and split the incremental chain).
	SolvesAhead(params json.RawMessage, incremental bool) (bool, error)
	// Solve correlates in.Def with in.Ref and returns the frame's
	// solution, an opaque document. It stops early with ctx.Err() when
	// ctx is done.
	Solve(ctx context.Context, in SolveInput) ([]byte, error)
}

// SolveInput is what a frame is solved ahead from.
type SolveInput struct {
	// Ref is the series reference and Def the frame, turned by
	// Orientation; Mask the series' ROI mask image, if any.
	Ref, Def, Mask *imageio.Gray
	Orientation    imageio.Orientation
	// Params is the series' stored parameter document.
	Params json.RawMessage
	// Guess is the solution of the nearest frame already solved, or nil;
	// GuessState, when Guess is nil, the engine state after the last
	// finished frame, or nil (then the seed search starts the frame).
	Guess, GuessState []byte
	// GuessBefore, if not nil with Guess, is the solution of the frame
	// before Guess's, and GuessRatio the distance from Guess's frame to
	// this one over the distance from GuessBefore's to Guess's: the guess
	// is then moved on along that step (series.Extrapolate).
	GuessBefore []byte
	GuessRatio  float64
	// Threads caps the worker goroutines of the correlation.
	Threads int
	// Progress is called as in FrameInput.
	Progress func(done, total int)
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

// Error returns "field: detail".
func (e *FieldError) Error() string { return fmt.Sprintf("%s: %s", e.Field, e.Detail) }

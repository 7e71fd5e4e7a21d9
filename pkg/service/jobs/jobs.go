// Package jobs is the job model of the Mottle service: the records of
// analyses, series and frames, and the three interfaces a backend provides
// to keep them: a Store for records, Blobs for images and results, and a
// Queue that hands job ids to workers with explicit acknowledgement.
//
// The embedded backend (package embedded) keeps records in bbolt, blobs in
// files and the queue in memory, rebuilt from the records on start. A
// distributed backend maps the same interfaces onto a key-value bucket, an
// object store and a work-queue stream.
package jobs

import (
	"encoding/json"
	"errors"
	"time"

	"github.com/mottledic/mottle/pkg/quality"
)

// Kind says what a job computes.
type Kind string

const (
	// Analysis correlates one uploaded reference and deformed image.
	Analysis Kind = "analysis"
	// Frame correlates one frame of a series against the series reference.
	Frame Kind = "frame"
	// Stereo measures one stereo state from the left and right reference
	// images (and, for a deformed state, the left and right deformed
	// images) with a rig file; served under /v1/analyses like Analysis.
	Stereo Kind = "stereo"
)

// State is where a job is in its life.
type State string

const (
	// Queued: accepted and waiting for a worker.
	Queued State = "queued"
	// Running: a worker is computing it.
	Running State = "running"
	// Succeeded: results are stored.
	Succeeded State = "succeeded"
	// Failed: the job stopped with an error, kept in Job.Error.
	Failed State = "failed"
	// Canceled: canceled by a client before it finished.
	Canceled State = "canceled"
)

// States lists every state, in life order.
func States() []State { return []State{Queued, Running, Succeeded, Failed, Canceled} }

// Terminal reports whether s is a final state.
func (s State) Terminal() bool { return s == Succeeded || s == Failed || s == Canceled }

// Progress counts finished work units (grid points) of a running job.
type Progress struct {
	Done  int `json:"done"`
	Total int `json:"total"`
}

// Summary is the short result of a job: what a frame append answers with and
// what one row of a series curve holds.
type Summary struct {
	// Points is the number of grid points; Valid the number measured.
	Points int `json:"points"`
	Valid  int `json:"valid"`
	// ValidFraction is Valid/Points, 0 when there are no points.
	ValidFraction float64 `json:"valid_fraction"`
	// Mean holds the mean over valid points of each scalar quantity
	// (u, v, E11, E22, E12, …).
	Mean map[string]float64 `json:"mean,omitempty"`
	// Gauges holds named gauge values (extensometers, virtual gauges) when
	// the engine computes them, under the column names of a series curve:
	// "ext_<name>_eng", "ext_<name>_eng_std", "ext_<name>_true", "ext_<name>_stretch",
	// "gauge_<name>_<component>_mean" and "_std".
	Gauges map[string]float64 `json:"gauges,omitempty"`
	// Mode says how the series engine correlated a frame: "direct" (with
	// the reference) or "incremental" (with the previous frame, composed).
	// Empty for analyses.
	Mode string `json:"mode,omitempty"`
	// MeanZNCC is the mean ZNCC over the valid points (of the last
	// increment in incremental mode); Tracked the fraction of the points
	// valid in a series' first frame that are still valid. Series frames
	// only.
	MeanZNCC *float64 `json:"mean_zncc,omitempty"`
	Tracked  *float64 `json:"tracked_fraction,omitempty"`
	// Reacquired counts the points of an incremental series frame that
	// had been lost and were found again; ReturnedDirect is true for a
	// frame that went back to direct correlation after a check against
	// the reference. Series frames only.
	Reacquired     int  `json:"reacquired,omitempty"`
	ReturnedDirect bool `json:"returned_to_direct,omitempty"`
	// Seconds is the compute time of the job.
	Seconds float64 `json:"seconds"`
	// Warnings are the image quality warnings of the job's images (package
	// quality), each with what to change at the bench; for a series frame,
	// the frame's own and its change against the reference.
	Warnings []quality.Warning `json:"warnings,omitempty"`
}

// Failure is why a job failed, phrased for the caller.
type Failure struct {
	// Title is a short summary ("analysis failed", "job timeout").
	Title string `json:"title"`
	// Detail says what went wrong and, where possible, what to change.
	Detail string `json:"detail"`
	// Field names the input at fault, when one is ("params.subset").
	Field string `json:"field,omitempty"`
}

// Job is the record of one unit of work. Inputs live in Blobs under
// InputKey(ID, name); results under ResultKey(ID, name).
type Job struct {
	ID    string `json:"id"`
	Kind  Kind   `json:"kind"`
	State State  `json:"state"`
	// Project is the project the job belongs to (a frame: its series');
	// Owner the principal that created it. Empty in records written
	// before projects existed: the project "default".
	Project string `json:"project,omitempty"`
	Owner   string `json:"owner,omitempty"`
	// Params is the normalised parameter document (defaults applied).
	Params json.RawMessage `json:"params"`
	// Width and Height are the image size in pixels.
	Width  int `json:"width"`
	Height int `json:"height"`
	// HasMask is true when a mask image was uploaded (InputKey(ID, "mask")).
	HasMask bool `json:"has_mask,omitempty"`

	// Series and FrameIndex identify a frame job; Time and Load are the
	// values given with the frame, if any.
	Series     string `json:"series,omitempty"`
	FrameIndex int    `json:"frame,omitempty"`
	// Name names a frame in its series' curve (default frame_<index>),
	// or, for an analysis, is the label the user gave it (default from
	// the file names).
	Name string `json:"name,omitempty"`
	// Formats lists the result formats written when the job ran (see
	// pkg/results); others are rendered from field.npz on first request.
	// Empty means the service's default.
	Formats string   `json:"formats,omitempty"`
	Time    *float64 `json:"time,omitempty"`
	Load    *float64 `json:"load,omitempty"`

	Created  time.Time  `json:"created"`
	Started  *time.Time `json:"started,omitempty"`
	Finished *time.Time `json:"finished,omitempty"`
	// Attempts counts how many times a worker started the job.
	Attempts int `json:"attempts"`
	// CancelRequested is set when a client asks to cancel a running job;
	// the worker that runs it stops and marks it Canceled.
	CancelRequested bool `json:"cancel_requested,omitempty"`

	Progress Progress `json:"progress"`
	Summary  *Summary `json:"summary,omitempty"`
	Error    *Failure `json:"error,omitempty"`
	// Results lists the names of the stored result files.
	Results []string `json:"results,omitempty"`
}

// Series is the record of a test series: a reference image (in Blobs under
// SeriesKey(ID, "reference")), parameters, and its frames in order.
type Series struct {
	ID string `json:"id"`
	// Kind is what the series measures: empty for a 2D series (one
	// camera, frames of one image), Stereo for a stereo series (a rig,
	// a reference pair and frames of a left and a right image).
	Kind Kind `json:"kind,omitempty"`
	// Project and Owner are those of Job.
	Project string `json:"project,omitempty"`
	Owner   string `json:"owner,omitempty"`
	// Name is the label the user gave the series (default: the file name
	// of the reference).
	Name   string          `json:"name,omitempty"`
	Params json.RawMessage `json:"params"`
	Width  int             `json:"width"`
	Height int             `json:"height"`
	// HasMask is true when a mask was uploaded (SeriesKey(ID, "mask")).
	HasMask bool `json:"has_mask,omitempty"`
	// ReferenceName names the reference in the curve: the file name of
	// the uploaded part, or "reference".
	ReferenceName string `json:"reference_name,omitempty"`
	// Formats are the result formats each frame writes (see Job.Formats).
	Formats string    `json:"formats,omitempty"`
	Created time.Time `json:"created"`
	Updated time.Time `json:"updated"`
	// Frames holds the job id of each frame, by frame index.
	Frames []string `json:"frames"`
	// MaxInFlight bounds the frames of the series computed at once (the
	// frames ahead of the last finished one that may be correlated before
	// it, see package runner); 0 or 1 computes them one at a time.
	MaxInFlight int `json:"max_frames_in_flight,omitempty"`
}

// Errors a backend returns; callers test them with errors.Is.
var (
	// ErrNotFound: no record or blob under that id or key.
	ErrNotFound = errors.New("not found")
	// ErrExists: a record with that id already exists.
	ErrExists = errors.New("already exists")
	// ErrQueueFull: the queue is at capacity; try again later.
	ErrQueueFull = errors.New("queue full")
	// ErrClosed: the backend has been closed.
	ErrClosed = errors.New("backend closed")
)

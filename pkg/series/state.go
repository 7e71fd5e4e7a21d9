package series

import (
	"encoding/json"
	"errors"
	"fmt"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
)

// stateVersion is the version of the State layout; Restore refuses others.
const stateVersion = 1

// State is everything a Tracker needs to continue a series, apart from the
// images: the parameters, the tracked material points, the last frames'
// displacements for velocities, the curve so far and the noise-floor
// statistics. It encodes to and from JSON (NaN values as null).
type State struct {
	Version int    `json:"version"`
	Params  Params `json:"params"`
	// Grid is the lattice of material points in the reference image, px.
	Grid lattice `json:"grid"`
	// Switched is true once the tracker has gone incremental.
	Switched bool `json:"switched"`
	// FirstValid is the number of points valid in frame 1.
	FirstValid int `json:"first_valid"`
	// Initial marks the points valid in frame 1, row-major on Grid: the
	// points the tracked fraction counts and the only ones re-acquired
	// after they were lost. Empty before frame 1 (and in states written
	// before it existed: no re-acquisition then).
	Initial bits `json:"initial,omitempty"`
	// Mask is the ROI mask image the series was started with, if any.
	Mask *packedMask `json:"mask,omitempty"`
	// Points hold each material point's current state, row-major on Grid.
	Points []PointState `json:"points"`
	// History holds the last (up to keptHistory) frames' displacements
	// and strains at the grid points, oldest first, for time derivatives
	// and the guess of an incremental step. States written before this
	// version hold up to three; the oldest of three is never read.
	History []Snapshot `json:"history"`
	// Curve is one row per frame, the reference first.
	Curve []Summary `json:"curve"`
	// Static holds the statistics of each static frame (noise floor).
	Static []map[string]QStat `json:"static,omitempty"`
	// RefQuality is the image quality of the reference, measured when the
	// first frame is added (absent in states written before it existed:
	// then it is measured at the next frame).
	RefQuality *quality.Report `json:"ref_quality,omitempty"`
}

// PointState is a material point's current position x(X) in the latest
// frame (px), its deformation gradient at subset level F = [F11, F12, F21,
// F22], the last ZNCC, predicted std of the position and whether it is
// still tracked.
type PointState struct {
	X, Y       float64
	F          [4]float64
	ZNCC       float64
	StdU, StdV float64
	Valid      bool
	// Reason says why an invalid point has no value (not saved in State).
	Reason string
}

// Snapshot is one frame's displacement (px) and Green–Lagrange strain at
// every grid point, with its time stamp.
type Snapshot struct {
	Time    float64 `json:"time_s"`
	HasTime bool    `json:"has_time"`
	U       nfloats `json:"u"`
	V       nfloats `json:"v"`
	E11     nfloats `json:"E11"`
	E22     nfloats `json:"E22"`
	E12     nfloats `json:"E12"`
}

// lattice fields are exported through JSON with these names.
func (l lattice) MarshalJSON() ([]byte, error) {
	return json.Marshal(struct {
		X0, Y0, Step float64
		Nx, Ny       int
	}{l.X0, l.Y0, l.Step, l.Nx, l.Ny})
}

// UnmarshalJSON decodes a lattice.
func (l *lattice) UnmarshalJSON(b []byte) error {
	var s struct {
		X0, Y0, Step float64
		Nx, Ny       int
	}
	if err := json.Unmarshal(b, &s); err != nil {
		return err
	}
	*l = lattice{s.X0, s.Y0, s.Step, s.Nx, s.Ny}
	return nil
}

// bits is a boolean slice that encodes to JSON as a string of 0 and 1.
type bits []bool

// MarshalJSON writes the flags as a string such as "0110".
func (b bits) MarshalJSON() ([]byte, error) {
	s := make([]byte, len(b))
	for i, v := range b {
		s[i] = '0'
		if v {
			s[i] = '1'
		}
	}
	return json.Marshal(string(s))
}

// UnmarshalJSON reads the form written by MarshalJSON.
func (b *bits) UnmarshalJSON(j []byte) error {
	var s string
	if err := json.Unmarshal(j, &s); err != nil {
		return err
	}
	*b = make(bits, len(s))
	for i := range len(s) {
		switch s[i] {
		case '0':
		case '1':
			(*b)[i] = true
		default:
			return fmt.Errorf("flag string has %q at %d; want only 0 and 1", s[i], i)
		}
	}
	return nil
}

// nfloats is a float slice whose NaNs encode as JSON null.
type nfloats []float64

// MarshalJSON writes NaN and ±Inf as null.
func (f nfloats) MarshalJSON() ([]byte, error) {
	return appendFloats(make([]byte, 0, 2+20*len(f)), f), nil
}

// UnmarshalJSON reads null as NaN.
func (f *nfloats) UnmarshalJSON(b []byte) error {
	out, err := decodeFloats(b, nil)
	if err != nil {
		return err
	}
	if out == nil {
		out = nfloats{}
	}
	*f = out
	return nil
}

// MarshalJSON writes a PointState compactly: [x, y, F11, F12, F21, F22,
// zncc, std_u, std_v, valid].
func (q PointState) MarshalJSON() ([]byte, error) {
	v := 0.0
	if q.Valid {
		v = 1
	}
	f := [10]float64{q.X, q.Y, q.F[0], q.F[1], q.F[2], q.F[3], q.ZNCC, q.StdU, q.StdV, v}
	return appendFloats(make([]byte, 0, 200), f[:]), nil
}

// UnmarshalJSON reads the form written by MarshalJSON.
func (q *PointState) UnmarshalJSON(b []byte) error {
	var buf [10]float64
	f, err := decodeFloats(b, buf[:0])
	if err != nil {
		return err
	}
	if len(f) != 10 {
		return fmt.Errorf("point state has %d values, want 10", len(f))
	}
	*q = PointState{X: f[0], Y: f[1], F: [4]float64{f[2], f[3], f[4], f[5]}, ZNCC: f[6], StdU: f[7], StdV: f[8], Valid: f[9] == 1}
	return nil
}

// State returns a deep copy of the tracker's state, ready to encode.
func (t *Tracker) State() State {
	b, err := json.Marshal(t.st)
	if err != nil {
		// Every field is encodable; this cannot happen.
		panic(fmt.Sprintf("series: encoding state: %v", err))
	}
	var s State
	if err := json.Unmarshal(b, &s); err != nil {
		panic(fmt.Sprintf("series: decoding state: %v", err))
	}
	return s
}

// StateJSON returns the tracker's state as the JSON that State decodes
// from, without the copy State makes (a series frame in the service
// stores it after every frame), and with the thread count left out: a
// setting of the machine, not of the series.
func (t *Tracker) StateJSON() ([]byte, error) {
	st := t.st
	st.Params.Analysis.Threads = 0
	b, err := json.Marshal(st)
	if err != nil {
		return nil, fmt.Errorf("encode series state: %w", err)
	}
	return b, nil
}

// check reports what is inconsistent in a decoded state.
func (s State) check() error {
	var errs []error
	if s.Version != stateVersion {
		errs = append(errs, fmt.Errorf("state version %d, this build reads version %d", s.Version, stateVersion))
	}
	n := s.Grid.Nx * s.Grid.Ny
	if n == 0 || !(s.Grid.Step > 0) {
		errs = append(errs, fmt.Errorf("state grid %d×%d step %g is empty", s.Grid.Nx, s.Grid.Ny, s.Grid.Step))
	}
	if len(s.Points) != n {
		errs = append(errs, fmt.Errorf("state has %d points for a %d-point grid", len(s.Points), n))
	}
	if len(s.Initial) != 0 && len(s.Initial) != n {
		errs = append(errs, fmt.Errorf("state marks %d initial points for a %d-point grid", len(s.Initial), n))
	}
	if len(s.Curve) == 0 {
		errs = append(errs, errors.New("state has no curve rows (the reference row is missing)"))
	}
	if len(s.History) == 0 || len(s.History) > 3 {
		errs = append(errs, fmt.Errorf("state has %d history snapshots, want 1 to 3", len(s.History)))
	}
	for i, h := range s.History {
		if len(h.U) != n || len(h.V) != n || len(h.E11) != n || len(h.E22) != n || len(h.E12) != n {
			errs = append(errs, fmt.Errorf("state history %d does not match the %d-point grid", i, n))
		}
	}
	return errors.Join(errs...)
}

// keptHistory is how many frames' snapshots a state keeps (State.History):
// the frame just added and the one before it. The next frame's time
// derivatives take these two and its own (timeDerivs: the quadratic
// through three samples), and an incremental step's guess the step
// between them. A third, older snapshot, kept before, was never read; it
// was a fifth of the state a series frame stores (3 600 points: 144 KB of
// 0.74 MB), written by every node of a cluster and read by the next frame.
const keptHistory = 2

// Restore continues a series from a saved State. ref is the reference
// image and last the last frame added (ignored, and may be nil, when no
// frame has been added yet); both must be the images the state was made
// with. The parameters and the ROI mask image, if any, come from the state.
func Restore(ref, last *imageio.Gray, s State) (*Tracker, error) {
	if err := s.check(); err != nil {
		return nil, fmt.Errorf("restore series: %w", err)
	}
	if ref == nil || ref.W < 1 || ref.H < 1 {
		return nil, errors.New("restore series: reference image is empty")
	}
	c, err := newCorrelatorOn(ref, s.Params, s.Mask, &s.Grid)
	if err != nil {
		return nil, fmt.Errorf("restore series: %w", err)
	}
	return restore(ref, last, s, c)
}

// RestoreLoading is Restore with the last frame loaded by last when the
// tracker first needs it, for an incremental step or a re-acquisition
// (which correlate the last frame with the next), instead of at once: a
// frame of a direct-mode series added from its solution (AddSolved) then
// never reads it. An error of last, or a frame of another size than the
// reference, is the error of that Add. last may be nil when no frame has
// been added yet.
func RestoreLoading(ref *imageio.Gray, last func() (*imageio.Gray, error), s State) (*Tracker, error) {
	if err := s.check(); err != nil {
		return nil, fmt.Errorf("restore series: %w", err)
	}
	if ref == nil || ref.W < 1 || ref.H < 1 {
		return nil, errors.New("restore series: reference image is empty")
	}
	c, err := newCorrelatorOn(ref, s.Params, s.Mask, &s.Grid)
	if err != nil {
		return nil, fmt.Errorf("restore series: %w", err)
	}
	t, err := restoreOn(ref, s, c)
	if err != nil {
		return nil, err
	}
	if len(s.Curve) > 1 {
		if last == nil {
			return nil, fmt.Errorf("restore series: %d frames were added, so the last frame is needed", len(s.Curve)-1)
		}
		t.prev, t.loadPrev = nil, last
	}
	return t, nil
}

func restore(ref, last *imageio.Gray, s State, c correlator) (*Tracker, error) {
	t, err := restoreOn(ref, s, c)
	if err != nil {
		return nil, err
	}
	if len(s.Curve) > 1 {
		if last == nil || last.W != ref.W || last.H != ref.H {
			return nil, fmt.Errorf("restore series: %d frames were added, so the last frame is needed, at the reference's size (%d×%d): %w", len(s.Curve)-1, ref.W, ref.H, ErrSize)
		}
		t.prev = last
	}
	return t, nil
}

// restoreOn is the part of restore that does not depend on the last frame.
func restoreOn(ref *imageio.Gray, s State, c correlator) (*Tracker, error) {
	if err := s.check(); err != nil {
		return nil, fmt.Errorf("restore series: %w", err)
	}
	t, err := newTracker(ref, FrameMeta{}, s.Params, c)
	if err != nil {
		return nil, fmt.Errorf("restore series: %w", err)
	}
	if t.st.Grid != s.Grid {
		return nil, fmt.Errorf("restore series: the state's grid %+v differs from the one the parameters give for this reference %+v; is it the same reference image?", s.Grid, t.st.Grid)
	}
	t.st = s
	return t, nil
}

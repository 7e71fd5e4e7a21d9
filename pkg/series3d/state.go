package series3d

import (
	"encoding/json"
	"errors"
	"fmt"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/stereo"
)

// State is what a stereo series needs to go on in another process after
// its last frame, beside its parameters, the rig and the reference pair:
// the matched reference (so that it is not matched again), the frame of
// the results and the curve's rows so far.
type State struct {
	Ref   stereo.Saved
	Frame stereo.Frame
	Rows  []series.Summary
	// Static holds the statistics of each static frame (noise floor).
	Static []map[string]series.QStat `json:",omitempty"`
	// Last is the state of the last pair, kept when the series may track
	// from it (Params.Incremental always or auto); Switched is true once
	// auto mode has switched to it.
	Last     *stereo.SavedState `json:",omitempty"`
	Switched bool               `json:",omitempty"`
}

// State returns the series' state after its last frame.
func (s *Series) State() State {
	st := State{Ref: s.ref.Save(), Frame: s.frame, Rows: append([]series.Summary(nil), s.curve.Rows...), Static: s.static, Switched: s.incr}
	if s.NeedsPrevious() {
		l := s.last.State.Save()
		st.Last = &l
	}
	return st
}

// MarshalState encodes the series' state as JSON.
func (s *Series) MarshalState() ([]byte, error) {
	b, err := json.Marshal(s.State())
	if err != nil {
		return nil, fmt.Errorf("stereo series state: %w", err)
	}
	return b, nil
}

// UnmarshalState decodes a state written by MarshalState.
func UnmarshalState(b []byte) (State, error) {
	var st State
	if err := json.Unmarshal(b, &st); err != nil {
		return st, fmt.Errorf("stereo series state: %w; the stored state is damaged, start the series again", err)
	}
	if len(st.Rows) == 0 {
		return st, errors.New("stereo series state: no curve rows; the stored state is damaged, start the series again")
	}
	return st, nil
}

// Restore continues a series from its state st, with the parameters p,
// the rig and the reference pair it was started with: nothing is matched
// again, and the series goes on exactly as the one st was taken from
// (given, when NeedsPrevious, the last pair's images with SetPrevious).
func Restore(rig *calib.Rig, left, right *imageio.Gray, p Params, st State) (*Series, error) {
	if left == nil || right == nil {
		return nil, errors.New("stereo series: the reference pair is missing an image")
	}
	if err := p.Validate(left.W, left.H); err != nil {
		return nil, fmt.Errorf("stereo series: %w", err)
	}
	o, _ := p.Options(left.W, left.H)
	ref, err := stereo.Restore(rig, st.Ref, o)
	if err != nil {
		return nil, fmt.Errorf("stereo series: %w", err)
	}
	if len(st.Rows) == 0 {
		return nil, errors.New("stereo series: the state has no curve rows")
	}
	s := &Series{p: p, ref: ref, frame: st.Frame, l0: left, r0: right, static: st.Static, incr: st.Switched}
	if st.Last != nil {
		last, err := st.Last.State(len(ref.Points))
		if err != nil {
			return nil, fmt.Errorf("stereo series: %w", err)
		}
		s.last = &Frame{Index: len(st.Rows) - 1, State: last}
	}
	s.curve = CurveOf(p, st)
	s.curve.Noise = nil // Curve adds it from static
	return s, nil
}

// CurveOf returns the curve of a series with parameters p whose state
// after its last frame is st, without its images.
func CurveOf(p Params, st State) series.Curve {
	c := series.Curve{Params: curveParams(p), Noise: series.NoiseFromFrames(st.Static)}
	c.Rows = append([]series.Summary(nil), st.Rows...)
	return c
}

// curveParams are the curve parameters of a stereo series: lengths in
// space, in mm; the instruments placed in px of the left reference.
func curveParams(p Params) series.Params {
	return series.Params{Extensometers: p.Extensometers, Gauges: p.Gauges, Area: p.Area, Properties: p.Properties, Units: "px"}
}

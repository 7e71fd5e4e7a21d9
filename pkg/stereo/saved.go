package stereo

import (
	"encoding/json"
	"fmt"
	"math"
	"strconv"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/correlate"
)

// Saved is a Reference in a form that encoding/json keeps exactly (NaN
// as null), so that a series can be continued in another process without
// matching its reference pair again: the grid, the image size and, per
// point, its numbers and its two statuses.
type Saved struct {
	Grid correlate.Grid
	W, H int
	// Values holds savedValues numbers per point, in the order of
	// savedValues' comment; Status and Match the point's statuses.
	Values        Floats `json:"values"`
	Status, Match []uint8
}

// Floats is a float slice whose NaN and ±Inf values encode as JSON null
// (read back as NaN): the numbers of points that were not measured.
type Floats []float64

// MarshalJSON writes the numbers, NaN and ±Inf as null.
func (f Floats) MarshalJSON() ([]byte, error) {
	b := make([]byte, 0, 2+20*len(f))
	b = append(b, '[')
	for i, v := range f {
		if i > 0 {
			b = append(b, ',')
		}
		if math.IsNaN(v) || math.IsInf(v, 0) {
			b = append(b, "null"...)
			continue
		}
		b = strconv.AppendFloat(b, v, 'g', -1, 64)
	}
	return append(b, ']'), nil
}

// UnmarshalJSON reads numbers and null (as NaN).
func (f *Floats) UnmarshalJSON(b []byte) error {
	var raw []*float64
	if err := json.Unmarshal(b, &raw); err != nil {
		return err
	}
	*f = make(Floats, len(raw))
	for i, v := range raw {
		if v == nil {
			(*f)[i] = math.NaN()
		} else {
			(*f)[i] = *v
		}
	}
	return nil
}

// Counts returns the number of points and of those matched and
// triangulated (status OK).
func (s Saved) Counts() (points, ok int) {
	for _, st := range s.Status {
		if Status(st) == OK {
			ok++
		}
	}
	return len(s.Status), ok
}

// savedValues is the count of numbers per point in Saved.Values: X, Y, XR,
// YR, P[0..11], Pos[0..2], Std[0..2], ZNCC, Gap, StdMatch.
const savedValues = 4 + 12 + 3 + 3 + 3

// Save returns the saved form of r.
func (r *Reference) Save() Saved {
	s := Saved{Grid: r.Grid, W: r.w, H: r.h, Values: make([]float64, 0, savedValues*len(r.Points)),
		Status: make([]uint8, len(r.Points)), Match: make([]uint8, len(r.Points))}
	for k, p := range r.Points {
		s.Values = append(s.Values, p.X, p.Y, p.XR, p.YR)
		s.Values = append(s.Values, p.P[:]...)
		s.Values = append(s.Values, p.Pos[:]...)
		s.Values = append(s.Values, p.Std[:]...)
		s.Values = append(s.Values, p.ZNCC, p.Gap, p.StdMatch)
		s.Status[k], s.Match[k] = uint8(p.Status), uint8(p.Match)
	}
	return s
}

// Restore returns the Reference that s was saved from, for rig and the
// options o that Match was given (their defaults are filled in as Match
// fills them; Correlate.Threads may differ, results do not depend on it).
// It returns an error when s does not fit together or does not fit the rig.
func Restore(rig *calib.Rig, s Saved, o Options) (*Reference, error) {
	tri, err := NewTriangulator(rig)
	if err != nil {
		return nil, err
	}
	n := s.Grid.Len()
	if n == 0 || len(s.Values) != savedValues*n || len(s.Status) != n || len(s.Match) != n {
		return nil, fmt.Errorf("stereo: saved reference: %d points on a %d×%d grid with %d values and %d statuses; the saved state is damaged, start the series again",
			n, s.Grid.Nx, s.Grid.Ny, len(s.Values), len(s.Status))
	}
	if s.W != rig.W || s.H != rig.H {
		return nil, fmt.Errorf("stereo: saved reference: measured on %d×%d px images but the rig is for %d×%d px", s.W, s.H, rig.W, rig.H)
	}
	if err := o.Validate(); err != nil {
		return nil, err
	}
	r := &Reference{Grid: s.Grid, Points: make([]Point, n), Options: o.withDefaults(rig), tri: tri, w: s.W, h: s.H}
	for k := range r.Points {
		v := s.Values[savedValues*k : savedValues*(k+1)]
		p := &r.Points[k]
		p.X, p.Y, p.XR, p.YR = v[0], v[1], v[2], v[3]
		copy(p.P[:], v[4:16])
		copy(p.Pos[:], v[16:19])
		copy(p.Std[:], v[19:22])
		p.ZNCC, p.Gap, p.StdMatch = v[22], v[23], v[24]
		p.Status, p.Match = Status(s.Status[k]), correlate.Status(s.Match[k])
		if p.Status > NoRay {
			return nil, fmt.Errorf("stereo: saved reference: point %d has an unknown status %d; the saved state is damaged, start the series again", k, s.Status[k])
		}
	}
	return r, nil
}

// SavedState is a State in the form of Saved: per point, its numbers and
// its two statuses.
type SavedState struct {
	// Values holds savedStateValues numbers per point: XL, YL, XR, YR,
	// Pos[0..2], Disp[0..2], Std[0..2], ZNCC, Gap.
	Values        Floats `json:"values"`
	Status, Match []uint8
	// Cov holds 3 numbers per point, StatePoint.Cov; states saved before
	// it was kept lack it and read as uncorrelated axes.
	Cov Floats `json:"cov,omitempty"`
}

const savedStateValues = 4 + 3 + 3 + 3 + 2

// Save returns the saved form of s.
func (s *State) Save() SavedState {
	out := SavedState{Values: make(Floats, 0, savedStateValues*len(s.Points)), Status: make([]uint8, len(s.Points)), Match: make([]uint8, len(s.Points)),
		Cov: make(Floats, 0, 3*len(s.Points))}
	for k, p := range s.Points {
		out.Cov = append(out.Cov, p.Cov[:]...)
		out.Values = append(out.Values, p.XL, p.YL, p.XR, p.YR)
		out.Values = append(out.Values, p.Pos[:]...)
		out.Values = append(out.Values, p.Disp[:]...)
		out.Values = append(out.Values, p.Std[:]...)
		out.Values = append(out.Values, p.ZNCC, p.Gap)
		out.Status[k], out.Match[k] = uint8(p.Status), uint8(p.Match)
	}
	return out
}

// State returns the State that s was saved from, which must have n
// points (those of its reference).
func (s SavedState) State(n int) (*State, error) {
	if len(s.Values) != savedStateValues*n || len(s.Status) != n || len(s.Match) != n || (s.Cov != nil && len(s.Cov) != 3*n) {
		return nil, fmt.Errorf("stereo: saved state: %d values, %d covariances and %d statuses for %d points; the saved state is damaged, start the series again", len(s.Values), len(s.Cov), len(s.Status), n)
	}
	st := &State{Points: make([]StatePoint, n)}
	for k := range st.Points {
		v := s.Values[savedStateValues*k : savedStateValues*(k+1)]
		p := &st.Points[k]
		p.XL, p.YL, p.XR, p.YR = v[0], v[1], v[2], v[3]
		copy(p.Pos[:], v[4:7])
		copy(p.Disp[:], v[7:10])
		copy(p.Std[:], v[10:13])
		p.ZNCC, p.Gap = v[13], v[14]
		if s.Cov != nil {
			copy(p.Cov[:], s.Cov[3*k:3*k+3])
		}
		p.Status, p.Match = Status(s.Status[k]), correlate.Status(s.Match[k])
		if p.Status > NoRay {
			return nil, fmt.Errorf("stereo: saved state: point %d has an unknown status %d; the saved state is damaged, start the series again", k, s.Status[k])
		}
	}
	return st, nil
}

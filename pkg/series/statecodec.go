package series

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"math"
)

// The binary form of a State, the blob a series frame of the service
// leaves for the next frame. Its bulk, the points and the history of
// displacements and strains (3 snapshots × 5 arrays of a float per grid
// point), is stored as little-endian float64, so every value comes back
// bit for bit and nothing is formatted or parsed; the rest of the state
// (parameters, curve rows, noise-floor statistics, reference quality, ROI
// mask) is small and stays in the JSON of State, as a header:
//
//	"MSTA" version(1 byte, 1)
//	len(header) (uvarint), header: the JSON of the State with its grid,
//	    initial points, points and history left out (zero or empty)
//	X0 Y0 Step (float64) Nx Ny (uint32); n = Nx·Ny
//	len(Initial) (uvarint, 0 or n), then the flags, 8 a byte, most
//	    significant bit first, the unused bits of the last byte zero
//	n points, row-major on the grid: X Y F11 F12 F21 F22 ZNCC StdU StdV
//	    (float64), valid (1 byte, 0 or 1)
//	the number of history snapshots (1 byte, 0 to 3), then each:
//	    Time (float64), HasTime (1 byte, 0 or 1), U V E11 E22 E12 (n
//	    float64 each)
//
// and nothing after. A point's Reason is not kept, as in the JSON form.
//
// Version 2 (Tracker.StateBinaryRef) is version 1 without the points, for
// a frame added from its solution (the blob of a frame solved ahead, issue
// 21), whose points are bit for bit the solution's: in their place it
// holds the SHA-256 of the solution's bytes (32 bytes), and
// DecodeStateWith reads the points from the solution, checked against
// it, with their Reasons left out as in version 1. The solution of a
// frame is kept while its state is the series' last (package runner), and
// the state is 0.26 MB smaller for 3 600 points.
//
// DecodeState reads version 1 and JSON, DecodeStateWith every form.
const (
	stateMagic      = "MSTA"
	stateBinVersion = 1
	stateRefVersion = 2
	statePoint      = 9*8 + 1 // one point
	maxHistory      = 3
)

// IsBinaryState reports whether b starts as the binary form of a State
// (State.MarshalBinary) rather than its JSON.
func IsBinaryState(b []byte) bool {
	return len(b) >= len(stateMagic) && string(b[:len(stateMagic)]) == stateMagic
}

// MarshalBinary encodes s in the binary form above. The thread count is
// kept as it is; Tracker.StateBinary leaves it out.
func (s *State) MarshalBinary() ([]byte, error) { return s.marshalBinary(nil) }

// marshalBinary encodes s in version 1, or with ref (a SHA-256) in version
// 2, naming the solution that holds its points.
func (s *State) marshalBinary(ref []byte) ([]byte, error) {
	g := s.Grid
	if g.Nx < 0 || g.Ny < 0 || g.Nx > math.MaxUint32 || g.Ny > math.MaxUint32 {
		return nil, fmt.Errorf("series state: grid %d×%d cannot be encoded", g.Nx, g.Ny)
	}
	n := g.Nx * g.Ny
	if len(s.Points) != n || (len(s.Initial) != 0 && len(s.Initial) != n) || len(s.History) > maxHistory {
		return nil, fmt.Errorf("series state: %d points, %d initial flags and %d history snapshots for a %d-point grid cannot be encoded", len(s.Points), len(s.Initial), len(s.History), n)
	}
	for i, h := range s.History {
		if len(h.U) != n || len(h.V) != n || len(h.E11) != n || len(h.E22) != n || len(h.E12) != n {
			return nil, fmt.Errorf("series state: history %d does not match the %d-point grid", i, n)
		}
	}
	head := *s
	head.Grid, head.Initial, head.Points, head.History = lattice{}, nil, nil, nil
	hj, err := json.Marshal(head)
	if err != nil {
		return nil, fmt.Errorf("encode series state: %w", err)
	}
	size := len(stateMagic) + 1 + binary.MaxVarintLen64 + len(hj) + 3*8 + 2*4 +
		binary.MaxVarintLen64 + (n+7)/8 + n*statePoint + 1 + len(s.History)*(9+5*8*n)
	b := make([]byte, 0, size)
	b = append(b, stateMagic...)
	if ref != nil {
		b = append(b, stateRefVersion)
	} else {
		b = append(b, stateBinVersion)
	}
	b = binary.AppendUvarint(b, uint64(len(hj)))
	b = append(b, hj...)
	b = appendF64(b, g.X0, g.Y0, g.Step)
	b = binary.LittleEndian.AppendUint32(b, uint32(g.Nx))
	b = binary.LittleEndian.AppendUint32(b, uint32(g.Ny))
	b = binary.AppendUvarint(b, uint64(len(s.Initial)))
	if len(s.Initial) > 0 {
		flags := make([]byte, (n+7)/8)
		for k, v := range s.Initial {
			if v {
				flags[k/8] |= 0x80 >> (k % 8)
			}
		}
		b = append(b, flags...)
	}
	if ref != nil {
		b = append(b, ref...)
	} else {
		for _, q := range s.Points {
			b = appendF64(b, q.X, q.Y, q.F[0], q.F[1], q.F[2], q.F[3], q.ZNCC, q.StdU, q.StdV)
			b = append(b, flag(q.Valid))
		}
	}
	b = append(b, byte(len(s.History)))
	for _, h := range s.History {
		b = appendF64(b, h.Time)
		b = append(b, flag(h.HasTime))
		for _, a := range [5]nfloats{h.U, h.V, h.E11, h.E22, h.E12} {
			b = appendF64(b, a...)
		}
	}
	return b, nil
}

func appendF64(b []byte, v ...float64) []byte {
	for _, x := range v {
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(x))
	}
	return b
}

func flag(v bool) byte {
	if v {
		return 1
	}
	return 0
}

// errNotBinaryState reports data that does not start as the binary form.
var errNotBinaryState = errors.New("series state: not the binary form")

// stateReader reads the binary form, remembering the first error.
type stateReader struct {
	b   []byte
	err error
}

func (r *stateReader) fail(format string, a ...any) {
	if r.err == nil {
		r.err = fmt.Errorf("series state: "+format, a...)
	}
}

// take returns the next n bytes, or nil (and an error) if there are fewer.
func (r *stateReader) take(n int, what string) []byte {
	if r.err != nil {
		return nil
	}
	if n < 0 || n > len(r.b) {
		r.fail("%s truncated", what)
		return nil
	}
	out := r.b[:n]
	r.b = r.b[n:]
	return out
}

func (r *stateReader) uvarint(what string) uint64 {
	if r.err != nil {
		return 0
	}
	v, m := binary.Uvarint(r.b)
	if m <= 0 {
		r.fail("%s truncated", what)
		return 0
	}
	var tmp [binary.MaxVarintLen64]byte
	if m != binary.PutUvarint(tmp[:], v) {
		r.fail("%s not in its shortest form", what)
		return 0
	}
	r.b = r.b[m:]
	return v
}

func (r *stateReader) flag(what string) bool {
	b := r.take(1, what)
	if b == nil {
		return false
	}
	if b[0] > 1 {
		r.fail("%s is %d, want 0 or 1", what, b[0])
	}
	return b[0] == 1
}

// floats fills dst from the next len(dst) float64.
func (r *stateReader) floats(dst []float64, what string) {
	b := r.take(8*len(dst), what)
	if b == nil {
		return
	}
	for i := range dst {
		dst[i] = math.Float64frombits(binary.LittleEndian.Uint64(b[8*i:]))
	}
}

// UnmarshalBinary decodes the binary form above: the header, the grid,
// then exactly the flags, points and history of the grid and nothing
// after them. Restore checks the decoded state against its grid.
func (s *State) UnmarshalBinary(data []byte) error {
	st, ref, err := unmarshalState(data)
	if err != nil {
		return err
	}
	if ref != nil {
		return errors.New("series state: its points are those of the frame's solution (binary form version 2); read it with DecodeStateWith")
	}
	*s = st
	return nil
}

// unmarshalState decodes either version of the binary form; for version
// 2 it returns the state without its points and the SHA-256 of the
// solution that holds them.
func unmarshalState(data []byte) (State, []byte, error) {
	var ref []byte
	st, err := decodeBinaryState(data, &ref)
	return st, ref, err
}

// decodeBinaryState is unmarshalState, setting *ref for version 2.
func decodeBinaryState(data []byte, ref *[]byte) (State, error) {
	if !IsBinaryState(data) || len(data) < len(stateMagic)+1 {
		return State{}, errNotBinaryState
	}
	v := data[len(stateMagic)]
	if v != stateBinVersion && v != stateRefVersion {
		return State{}, fmt.Errorf("series state: binary form version %d, this build reads versions %d and %d", v, stateBinVersion, stateRefVersion)
	}
	perPoint := statePoint
	if v == stateRefVersion {
		perPoint = 5 * 8 // at least one history snapshot
	}
	r := &stateReader{b: data[len(stateMagic)+1:]}
	hl := r.uvarint("header length")
	if r.err == nil && hl > uint64(len(r.b)) {
		r.fail("header of %d bytes truncated", hl)
	}
	hj := r.take(int(hl), "header")
	if r.err != nil {
		return State{}, r.err
	}
	var st State
	if err := json.Unmarshal(hj, &st); err != nil {
		return State{}, fmt.Errorf("series state header: %w", err)
	}
	var gf [3]float64
	r.floats(gf[:], "grid")
	dims := r.take(8, "grid")
	if r.err != nil {
		return State{}, r.err
	}
	nx, ny := binary.LittleEndian.Uint32(dims), binary.LittleEndian.Uint32(dims[4:])
	n64 := uint64(nx) * uint64(ny)
	if n64 > uint64(len(r.b)/perPoint) {
		return State{}, fmt.Errorf("series state: grid %d×%d needs more than the %d bytes left", nx, ny, len(r.b))
	}
	n := int(n64)
	st.Grid = lattice{X0: gf[0], Y0: gf[1], Step: gf[2], Nx: int(nx), Ny: int(ny)}

	switch ni := r.uvarint("initial flags"); {
	case r.err != nil:
	case ni == 0:
		st.Initial = nil
	case ni != n64:
		r.fail("%d initial flags for a %d-point grid", ni, n)
	default:
		flags := r.take((n+7)/8, "initial flags")
		if flags == nil {
			break
		}
		st.Initial = make(bits, n)
		for k := range st.Initial {
			st.Initial[k] = flags[k/8]&(0x80>>(k%8)) != 0
		}
		if n%8 != 0 && flags[len(flags)-1]&(0xff>>(n%8)) != 0 {
			r.fail("initial flags have bits set past the last point")
		}
	}

	if v == stateRefVersion {
		*ref = r.take(sha256.Size, "solution digest")
	} else {
		st.Points = make([]PointState, n)
	}
	var f [9]float64
	for k := range st.Points {
		r.floats(f[:], "points")
		valid := r.flag("point valid flag")
		if r.err != nil {
			return State{}, r.err
		}
		st.Points[k] = PointState{X: f[0], Y: f[1], F: [4]float64{f[2], f[3], f[4], f[5]}, ZNCC: f[6], StdU: f[7], StdV: f[8], Valid: valid}
	}

	nh := r.take(1, "history count")
	if r.err != nil {
		return State{}, r.err
	}
	if nh[0] > maxHistory {
		return State{}, fmt.Errorf("series state: %d history snapshots, want at most %d", nh[0], maxHistory)
	}
	if uint64(nh[0])*(9+5*8*n64) > uint64(len(r.b)) {
		return State{}, fmt.Errorf("series state: %d history snapshots truncated", nh[0])
	}
	st.History = make([]Snapshot, nh[0])
	for i := range st.History {
		h := &st.History[i]
		var tm [1]float64
		r.floats(tm[:], "history time")
		h.Time, h.HasTime = tm[0], r.flag("history time flag")
		all := make([]float64, 5*n)
		r.floats(all, "history")
		h.U, h.V, h.E11, h.E22, h.E12 = all[:n:n], all[n:2*n:2*n], all[2*n:3*n:3*n], all[3*n:4*n:4*n], all[4*n:]
	}
	if r.err != nil {
		return State{}, r.err
	}
	if len(r.b) != 0 {
		return State{}, fmt.Errorf("series state: %d bytes after the history", len(r.b))
	}
	return st, nil
}

// DecodeState reads a State in the binary form (State.MarshalBinary,
// Tracker.StateBinary) or as JSON (Tracker.StateJSON, json.Marshal of a
// State, the form of earlier versions and of state.json).
func DecodeState(b []byte) (State, error) {
	var s State
	if IsBinaryState(b) {
		if err := s.UnmarshalBinary(b); err != nil {
			return State{}, err
		}
		return s, nil
	}
	if err := json.Unmarshal(b, &s); err != nil {
		return State{}, fmt.Errorf("series state: %w", err)
	}
	return s, nil
}

// DecodeStateWith is DecodeState for every form, version 2 of the binary
// form included: for a state whose points are those of the frame's
// solution it calls solution for that blob, checks it against the
// SHA-256 the state names, and takes its points without their Reasons (as
// version 1 keeps them). A missing or different solution is an error.
func DecodeStateWith(b []byte, solution func() ([]byte, error)) (State, error) {
	if !IsBinaryState(b) {
		return DecodeState(b)
	}
	st, ref, err := unmarshalState(b)
	if err != nil || ref == nil {
		return st, err
	}
	if solution == nil {
		return State{}, errors.New("series state: its points are those of the frame's solution, which was not given")
	}
	sb, err := solution()
	if err != nil {
		return State{}, fmt.Errorf("series state: the frame's solution, which holds its points: %w", err)
	}
	if sum := sha256.Sum256(sb); !bytes.Equal(sum[:], ref) {
		return State{}, errors.New("series state: the frame's solution is not the one the state was made from")
	}
	sol, err := DecodeSolution(sb)
	if err != nil {
		return State{}, fmt.Errorf("series state: the frame's solution: %w", err)
	}
	if sol.Grid != st.Grid || len(sol.Points) != st.Grid.Nx*st.Grid.Ny {
		return State{}, fmt.Errorf("series state: the frame's solution has %d points on another grid", len(sol.Points))
	}
	st.Points = make([]PointState, len(sol.Points))
	for k, q := range sol.Points {
		q.Reason = ""
		st.Points[k] = q
	}
	return st, nil
}

// StateRefersSolution reports whether b is a state in version 2 of the
// binary form, whose points are those of its frame's solution.
func StateRefersSolution(b []byte) bool {
	return IsBinaryState(b) && len(b) > len(stateMagic) && b[len(stateMagic)] == stateRefVersion
}

// CurveOfState returns the curve of the state encoded in b (CurveOf), in
// any form: it needs no points, so a state whose points are those of its
// frame's solution is read without it.
func CurveOfState(b []byte) (Curve, error) {
	st, _, err := unmarshalState(b)
	if errors.Is(err, errNotBinaryState) {
		st, err = DecodeState(b)
	}
	if err != nil {
		return Curve{}, err
	}
	return CurveOf(st), nil
}

// StateBinaryRef is StateBinary for a frame added from the solution sol
// (its binary form): when the state's points are bit for bit those of
// sol, it writes version 2, which names sol by its SHA-256 instead of
// holding them; otherwise (the frame was correlated in sequence, or sol
// is not in the binary form) version 1.
func (t *Tracker) StateBinaryRef(sol []byte) ([]byte, error) {
	st := t.st
	st.Params.Analysis.Threads = 0
	if samePoints(sol, st) {
		sum := sha256.Sum256(sol)
		return st.marshalBinary(sum[:])
	}
	return st.MarshalBinary()
}

// samePoints reports whether sol, a solution in the binary form, holds
// exactly the points of st on its grid (every float64 bit for bit, and
// the valid flags).
func samePoints(sol []byte, st State) bool {
	if len(sol) < len(solMagic) || string(sol[:len(solMagic)]) != solMagic {
		return false
	}
	s, err := DecodeSolution(sol)
	if err != nil || s.Grid != st.Grid || len(s.Points) != len(st.Points) {
		return false
	}
	for k, a := range s.Points {
		b := st.Points[k]
		if a.Valid != b.Valid {
			return false
		}
		x := [9]float64{a.X, a.Y, a.F[0], a.F[1], a.F[2], a.F[3], a.ZNCC, a.StdU, a.StdV}
		y := [9]float64{b.X, b.Y, b.F[0], b.F[1], b.F[2], b.F[3], b.ZNCC, b.StdU, b.StdV}
		for i := range x {
			if math.Float64bits(x[i]) != math.Float64bits(y[i]) {
				return false
			}
		}
	}
	return true
}

// StateBinary returns the tracker's state in the binary form, as
// StateJSON does in JSON: without a copy, and with the thread count left
// out.
func (t *Tracker) StateBinary() ([]byte, error) {
	st := t.st
	st.Params.Analysis.Threads = 0
	return st.MarshalBinary()
}

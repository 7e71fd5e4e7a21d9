package series

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"reflect"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
)

// sameBits reports whether a and b hold the same floats bit for bit.
func sameBits(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if math.Float64bits(a[i]) != math.Float64bits(b[i]) {
			return false
		}
	}
	return true
}

// sameState reports whether a and b are the same state: the bulk bit for
// bit (apart from the points' reasons, which a state does not keep), the
// rest by its JSON.
func sameState(t *testing.T, a, b State) bool {
	t.Helper()
	noReason := func(p []PointState) []PointState {
		out := append([]PointState(nil), p...)
		for k := range out {
			out[k].Reason = ""
		}
		return out
	}
	if a.Grid != b.Grid || !reflect.DeepEqual(a.Initial, b.Initial) || len(a.History) != len(b.History) ||
		!sameSolution(&Solution{Grid: a.Grid, Points: noReason(a.Points)}, &Solution{Grid: b.Grid, Points: noReason(b.Points)}) {
		return false
	}
	for i, h := range a.History {
		g := b.History[i]
		if math.Float64bits(h.Time) != math.Float64bits(g.Time) || h.HasTime != g.HasTime ||
			!sameBits(h.U, g.U) || !sameBits(h.V, g.V) || !sameBits(h.E11, g.E11) || !sameBits(h.E22, g.E22) || !sameBits(h.E12, g.E12) {
			return false
		}
	}
	a.Grid, a.Initial, a.Points, a.History = lattice{}, nil, nil, nil
	b.Grid, b.Initial, b.Points, b.History = lattice{}, nil, nil, nil
	ja, err := json.Marshal(a)
	if err != nil {
		t.Fatal(err)
	}
	jb, err := json.Marshal(b)
	if err != nil {
		t.Fatal(err)
	}
	return bytes.Equal(ja, jb)
}

// trackedState runs the frames of solveSeries through a tracker with a
// and returns it after the first frames of them (history full from 2).
func trackedState(t *testing.T, frames int) *Tracker {
	t.Helper()
	ref, imgs, p := solveSeries(t)
	tr, err := New(ref, FrameMeta{Name: "ref"}, p)
	if err != nil {
		t.Fatal(err)
	}
	for _, im := range imgs[:frames] {
		if _, err := tr.Add(context.Background(), im, FrameMeta{}); err != nil {
			t.Fatal(err)
		}
	}
	return tr
}

// smallState is a hand-made state on a 3×1 grid with every kind of float
// a state can hold (NaN, ±Inf, −0, a subnormal) in its points and history.
func smallState() State {
	nan, inf := math.NaN(), math.Inf(1)
	p := Defaults()
	s := State{Version: stateVersion, Params: p, Grid: lattice{X0: 10.5, Y0: -3, Step: 8, Nx: 3, Ny: 1},
		Switched: true, FirstValid: 2, Initial: bits{true, false, true},
		Points: []PointState{
			{X: 10.5, Y: -3, F: [4]float64{1, 0, 0, 1}, ZNCC: 0.999, StdU: 0.01, StdV: 0.02, Valid: true},
			{X: math.Copysign(0, -1), Y: 5e-324, F: [4]float64{inf, -inf, nan, math.MaxFloat64}, ZNCC: nan, StdU: nan, StdV: nan},
			{X: 1e300, Y: -1e-300, F: [4]float64{1, 2, 3, 4}, ZNCC: -1, Valid: true},
		},
		Curve: []Summary{ReferenceRow("ref", p)},
	}
	for k := range 3 {
		f := float64(k)
		s.History = append(s.History, Snapshot{Time: f + 0.5, HasTime: k != 1,
			U: nfloats{f, nan, -inf}, V: nfloats{math.Copysign(0, -1), 1, 2}, E11: nfloats{1e-7, 2e-7, 3e-7},
			E22: nfloats{inf, 0, 1}, E12: nfloats{5e-324, nan, f}})
	}
	return s
}

// TestStateBinary checks the binary form of a series state: a tracker's
// state after three frames (full history, initial flags) and a hand-made
// one with NaN, ±Inf, −0 and subnormals come back bit for bit; the binary
// form is smaller than the JSON; every truncation and the corruptions
// below are refused with an error, not a panic; and DecodeState still
// reads the JSON of earlier versions.
func TestStateBinary(t *testing.T) {
	tr := trackedState(t, 3)
	for name, st := range map[string]State{"tracked": tr.st, "small": smallState()} {
		b, err := st.MarshalBinary()
		if err != nil {
			t.Fatal(err)
		}
		got, err := DecodeState(b)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		if !sameState(t, got, st) {
			t.Errorf("%s: the round trip changed the state", name)
		}
		if err := got.check(); err != nil {
			t.Errorf("%s: decoded state: %v", name, err)
		}
	}
	js, err := tr.StateJSON()
	if err != nil {
		t.Fatal(err)
	}
	bin, err := tr.StateBinary()
	if err != nil {
		t.Fatal(err)
	}
	if len(bin) >= len(js) {
		t.Errorf("binary form %d bytes, JSON %d: want it smaller", len(bin), len(js))
	}
	// The JSON of an earlier version decodes to what its binary form does.
	fromJSON, err := DecodeState(js)
	if err != nil {
		t.Fatal(err)
	}
	fromBin, err := DecodeState(bin)
	if err != nil {
		t.Fatal(err)
	}
	if !sameState(t, fromJSON, fromBin) {
		t.Error("the JSON and the binary form of one state decode differently")
	}

	small := smallState()
	b, err := small.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	for n := range len(b) {
		if _, err := DecodeState(b[:n]); err == nil {
			t.Errorf("truncated to %d of %d bytes: no error", n, len(b))
		}
	}
	hl, m := uvarintAt(b, len(stateMagic)+1)
	grid := len(stateMagic) + 1 + m + int(hl) // the grid's first byte
	initial := grid + 3*8 + 2*4               // the initial flags' count
	points := initial + 2                     // count 3 in one byte, then one byte of flags
	history := points + 3*statePoint
	corrupt := func(what string, f func(c []byte) []byte) {
		t.Helper()
		c := f(append([]byte(nil), b...))
		if _, err := DecodeState(c); err == nil {
			t.Errorf("%s: no error", what)
		}
	}
	corrupt("version 2", func(c []byte) []byte { c[len(stateMagic)] = 2; return c })
	corrupt("a header that is not JSON", func(c []byte) []byte { c[len(stateMagic)+1+m] = '['; return c })
	corrupt("a byte after the history", func(c []byte) []byte { return append(c, 0) })
	corrupt("a grid of 2^32-1 × 2^32-1 points", func(c []byte) []byte {
		copy(c[initial-8:], []byte{255, 255, 255, 255, 255, 255, 255, 255})
		return c
	})
	corrupt("2 initial flags for 3 points", func(c []byte) []byte { c[initial] = 2; return c })
	corrupt("an initial flag past the last point", func(c []byte) []byte { c[initial+1] |= 1; return c })
	corrupt("valid flag 7", func(c []byte) []byte { c[points+9*8] = 7; return c })
	corrupt("4 history snapshots", func(c []byte) []byte { c[history] = 4; return c })
	corrupt("history time flag 2", func(c []byte) []byte { c[history+1+8] = 2; return c })
	corrupt("a header length in two bytes", func(c []byte) []byte {
		out := append([]byte(nil), c[:len(stateMagic)+1]...)
		out = append(out, byte(hl)|0x80, byte(hl>>7)|0x80, 0) // one more byte than needed
		return append(out, c[len(stateMagic)+1+m:]...)
	})
	if _, err := (&State{Grid: lattice{Nx: 2, Ny: 2}, Points: make([]PointState, 3)}).MarshalBinary(); err == nil {
		t.Error("3 points on a 2×2 grid encoded without an error")
	}
}

// uvarintAt decodes the uvarint at b[i:], returning it and its length.
func uvarintAt(b []byte, i int) (uint64, int) {
	var v uint64
	for k := 0; ; k++ {
		c := b[i+k]
		v |= uint64(c&0x7f) << (7 * k)
		if c < 0x80 {
			return v, k + 1
		}
	}
}

// TestStateBinaryContinues checks that a series continued from the binary
// form of its state gives the very frames, byte for byte (field.json and
// field.npz, the curve and the final state), of one continued from the JSON
// form, the form of earlier versions: the state is restored after frame 1
// and again after frame 3 of six.
func TestStateBinaryContinues(t *testing.T) {
	ref, imgs, p := solveSeries(t)
	ctx := context.Background()
	run := func(binaryForm bool) (fields [][]byte, curve, state []byte) {
		tr, err := New(ref, FrameMeta{Name: "ref"}, p)
		if err != nil {
			t.Fatal(err)
		}
		for n, im := range imgs {
			if n == 1 || n == 3 {
				var b []byte
				if binaryForm {
					b, err = tr.StateBinary()
				} else {
					b, err = tr.StateJSON()
				}
				if err != nil {
					t.Fatal(err)
				}
				st, err := DecodeState(b)
				if err != nil {
					t.Fatal(err)
				}
				if tr, err = Restore(ref, imgs[n-1], st); err != nil {
					t.Fatal(err)
				}
			}
			fr, err := tr.Add(ctx, im, FrameMeta{})
			if err != nil {
				t.Fatal(err)
			}
			f, err := FrameField(fr, tr.Params(), "ref", FrameMeta{}, im.W, im.H)
			if err != nil {
				t.Fatal(err)
			}
			f.Meta.Created = time.Time{} // the clock, not the state
			var js, npz bytes.Buffer
			if err := field.WriteJSON(&js, f); err != nil {
				t.Fatal(err)
			}
			if err := field.WriteNPZ(&npz, f); err != nil {
				t.Fatal(err)
			}
			fields = append(fields, js.Bytes(), npz.Bytes())
		}
		if curve, err = json.Marshal(tr.Curve()); err != nil {
			t.Fatal(err)
		}
		if state, err = tr.StateJSON(); err != nil {
			t.Fatal(err)
		}
		return fields, curve, state
	}
	fj, cj, sj := run(false)
	fb, cb, sb := run(true)
	for n := range fj {
		if !bytes.Equal(fj[n], fb[n]) {
			t.Errorf("frame %d: field.%s differs between the series continued from JSON and from the binary state", n/2+1, [2]string{"json", "npz"}[n%2])
		}
	}
	if !bytes.Equal(cj, cb) {
		t.Error("the curves differ")
	}
	if !bytes.Equal(sj, sb) {
		t.Error("the final states differ")
	}
}

// FuzzStateBinary checks that DecodeState never panics on any input, and
// that whatever it accepts encodes again to a form that decodes to the
// same state.
func FuzzStateBinary(f *testing.F) {
	s := smallState()
	b, err := s.MarshalBinary()
	if err != nil {
		f.Fatal(err)
	}
	f.Add(b)
	s.History, s.Initial = s.History[:1], nil
	if b, err = s.MarshalBinary(); err != nil {
		f.Fatal(err)
	}
	f.Add(b)
	f.Add([]byte(stateMagic))
	f.Add([]byte(`{"version":1}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		st, err := DecodeState(data)
		if err != nil {
			return
		}
		b, err := st.MarshalBinary()
		if err != nil {
			return // a JSON state whose arrays do not fit its grid
		}
		again, err := DecodeState(b)
		if err != nil {
			t.Fatalf("re-encoded state does not decode: %v", err)
		}
		b2, err := again.MarshalBinary()
		if err != nil || !bytes.Equal(b, b2) {
			t.Fatalf("re-encoding is not stable: %v", err)
		}
	})
}

// TestRestoreLoading checks that a tracker restored with RestoreLoading
// reads the last frame only when it needs it: not for a frame of a
// direct-mode series added from its solution, once for an incremental
// step; that either way the frame's field.json and the state are byte for
// byte those of a tracker restored with the last frame at once; and that
// a failing load or a frame of another size is the error of Add.
func TestRestoreLoading(t *testing.T) {
	ref, imgs, p := solveSeries(t)
	ctx := context.Background()
	for _, mode := range []string{IncrementalNever, IncrementalAlways} {
		p := p
		p.Incremental = mode
		tr, err := New(ref, FrameMeta{Name: "ref"}, p)
		if err != nil {
			t.Fatal(err)
		}
		for _, im := range imgs[:2] {
			if _, err := tr.Add(ctx, im, FrameMeta{}); err != nil {
				t.Fatal(err)
			}
		}
		b, err := tr.StateBinary()
		if err != nil {
			t.Fatal(err)
		}
		st, err := DecodeState(b)
		if err != nil {
			t.Fatal(err)
		}
		sol, err := Solve(ctx, ref, imgs[2], p, Options{}, st.Solution(), nil)
		if err != nil {
			t.Fatal(err)
		}
		add := func(tr *Tracker) ([]byte, []byte) {
			t.Helper()
			fr, err := tr.AddSolved(ctx, imgs[2], FrameMeta{}, sol)
			if err != nil {
				t.Fatal(err)
			}
			f, err := FrameField(fr, tr.Params(), "ref", FrameMeta{}, ref.W, ref.H)
			if err != nil {
				t.Fatal(err)
			}
			f.Meta.Created = time.Time{}
			var js bytes.Buffer
			if err := field.WriteJSON(&js, f); err != nil {
				t.Fatal(err)
			}
			s, err := tr.StateBinary()
			if err != nil {
				t.Fatal(err)
			}
			return js.Bytes(), s
		}
		eager, err := Restore(ref, imgs[1], st)
		if err != nil {
			t.Fatal(err)
		}
		wantField, wantState := add(eager)
		loads := 0
		lazy, err := RestoreLoading(ref, func() (*imageio.Gray, error) { loads++; return imgs[1], nil }, st)
		if err != nil {
			t.Fatal(err)
		}
		gotField, gotState := add(lazy)
		if want := map[string]int{IncrementalNever: 0, IncrementalAlways: 1}[mode]; loads != want {
			t.Errorf("%s: the last frame was loaded %d times, want %d", mode, loads, want)
		}
		if !bytes.Equal(gotField, wantField) || !bytes.Equal(gotState, wantState) {
			t.Errorf("%s: the frame differs from the one added with the last frame given at once", mode)
		}
		if mode != IncrementalAlways {
			continue
		}
		bad := errors.New("no such blob")
		for name, load := range map[string]func() (*imageio.Gray, error){
			"error":      func() (*imageio.Gray, error) { return nil, bad },
			"wrong size": func() (*imageio.Gray, error) { return imageio.NewGray(ref.W-1, ref.H), nil },
		} {
			tr, err := RestoreLoading(ref, load, st)
			if err != nil {
				t.Fatal(err)
			}
			_, err = tr.Add(ctx, imgs[2], FrameMeta{})
			if want := map[string]error{"error": bad, "wrong size": ErrSize}[name]; !errors.Is(err, want) {
				t.Errorf("%s: Add returned %v, want %v", name, err, want)
			}
		}
	}
	if _, err := RestoreLoading(ref, nil, trackedState(t, 1).st); err == nil {
		t.Error("RestoreLoading without a loader after a frame: no error")
	}
}

// TestStateRef checks version 2 of the binary state (Tracker.StateBinaryRef):
// a frame added from its solution stores a state that names the solution
// by its SHA-256 instead of holding its points, 73 bytes a point smaller;
// read with the solution (DecodeStateWith) it is exactly the state of
// version 1 (Reasons left out as there), the curve reads without it
// (CurveOfState), and a series continued from it gives the same frames. A
// missing or other solution is an error, and a frame correlated in
// sequence (no solution, or one set aside) stores version 1.
func TestStateRef(t *testing.T) {
	ref, imgs, p := solveSeries(t)
	ctx := context.Background()
	tr, err := New(ref, FrameMeta{Name: "ref"}, p)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := tr.Add(ctx, imgs[0], FrameMeta{}); err != nil {
		t.Fatal(err)
	}
	sol, err := Solve(ctx, ref, imgs[1], p, Options{}, tr.State().Solution(), nil)
	if err != nil {
		t.Fatal(err)
	}
	sb, err := sol.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	if _, err := tr.AddSolved(ctx, imgs[1], FrameMeta{}, sol); err != nil {
		t.Fatal(err)
	}
	v1, err := tr.StateBinary()
	if err != nil {
		t.Fatal(err)
	}
	v2, err := tr.StateBinaryRef(sb)
	if err != nil {
		t.Fatal(err)
	}
	n := len(tr.State().Points)
	if !StateRefersSolution(v2) || StateRefersSolution(v1) || len(v1)-len(v2) != n*statePoint-32 {
		t.Fatalf("version 2 of %d bytes against %d of version 1 for %d points", len(v2), len(v1), n)
	}
	want, err := DecodeState(v1)
	if err != nil {
		t.Fatal(err)
	}
	got, err := DecodeStateWith(v2, func() ([]byte, error) { return sb, nil })
	if err != nil {
		t.Fatal(err)
	}
	if again, err := got.MarshalBinary(); err != nil || !bytes.Equal(again, v1) {
		t.Errorf("the state read with its solution differs from version 1 (bit for bit, NaN included): %v", err)
	}
	c, err := CurveOfState(v2)
	if err != nil || !reflect.DeepEqual(c, CurveOf(want)) {
		t.Errorf("curve of version 2: %v", err)
	}
	other, err := (&Solution{Grid: sol.Grid, Points: append([]PointState(nil), sol.Points...)}).MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	other[len(other)-2] ^= 1 // a byte of the last point's Reason or flag
	for name, fetch := range map[string]func() ([]byte, error){
		"no solution":      nil,
		"missing solution": func() ([]byte, error) { return nil, errors.New("not found") },
		"other solution":   func() ([]byte, error) { return other, nil },
	} {
		if _, err := DecodeStateWith(v2, fetch); err == nil {
			t.Errorf("%s: read", name)
		}
	}
	if _, err := DecodeState(v2); err == nil {
		t.Error("DecodeState read version 2 without the solution")
	}
	// Continued from either form, the next frame and the state after it
	// are the same.
	next := func(st State) ([]byte, []byte) {
		r, err := Restore(ref, imgs[1], st)
		if err != nil {
			t.Fatal(err)
		}
		fr, err := r.Add(ctx, imgs[2], FrameMeta{})
		if err != nil {
			t.Fatal(err)
		}
		q := fmt.Sprint(fr.Quantities)
		b, err := r.StateBinaryRef(sb) // frame 3 is not frame 2's solution: version 1
		if err != nil {
			t.Fatal(err)
		}
		if StateRefersSolution(b) {
			t.Error("a frame correlated in sequence stored a state naming another frame's solution")
		}
		return []byte(q), b
	}
	q1, s1 := next(want)
	q2, s2 := next(got)
	if !bytes.Equal(q1, q2) || !bytes.Equal(s1, s2) {
		t.Error("the series continued from version 2 differs from the one continued from version 1")
	}
}

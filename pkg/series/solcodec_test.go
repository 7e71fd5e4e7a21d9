package series

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
	"reflect"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/field"
)

// sameSolution reports whether a and b hold the same grid and points, bit
// for bit (NaN payloads and the sign of zero included).
func sameSolution(a, b *Solution) bool {
	if a.Grid != b.Grid || len(a.Points) != len(b.Points) {
		return false
	}
	for k, p := range a.Points {
		q := b.Points[k]
		fp := [9]float64{p.X, p.Y, p.F[0], p.F[1], p.F[2], p.F[3], p.ZNCC, p.StdU, p.StdV}
		fq := [9]float64{q.X, q.Y, q.F[0], q.F[1], q.F[2], q.F[3], q.ZNCC, q.StdU, q.StdV}
		for i := range fp {
			if math.Float64bits(fp[i]) != math.Float64bits(fq[i]) {
				return false
			}
		}
		if p.Valid != q.Valid || p.Reason != q.Reason {
			return false
		}
	}
	return true
}

// TestSolutionBinary checks the binary form of a frame solution: it
// gives back every value bit for bit (NaN, ±Inf, −0, subnormals) with each
// point's Reason; every truncation and the corruptions below are refused
// with an error, not a panic; and DecodeSolution still reads the JSON an
// earlier version stored.
func TestSolutionBinary(t *testing.T) {
	nan := math.NaN()
	sol := &Solution{Grid: lattice{X0: 10.5, Y0: -3, Step: 8, Nx: 3, Ny: 1}, Points: []PointState{
		{X: 10.5, Y: -3, F: [4]float64{1, 0, 0, 1}, ZNCC: 0.999, StdU: 0.01, StdV: 0.02, Valid: true},
		{X: math.Copysign(0, -1), Y: 5e-324, F: [4]float64{math.Inf(1), math.Inf(-1), nan, math.MaxFloat64}, ZNCC: nan, StdU: nan, StdV: nan, Reason: "diverged"},
		{X: 1e300, Y: -1e-300, F: [4]float64{1, 2, 3, 4}, ZNCC: -1, Reason: "ümlaut and a long reason " + string(bytes.Repeat([]byte("x"), 200))},
	}}
	b, err := sol.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	got, err := DecodeSolution(b)
	if err != nil {
		t.Fatal(err)
	}
	if !sameSolution(got, sol) {
		t.Errorf("round trip:\n got %+v\nwant %+v", got, sol)
	}

	for n := range len(b) {
		if _, err := DecodeSolution(b[:n]); err == nil {
			t.Errorf("truncated to %d of %d bytes: no error", n, len(b))
		}
	}
	corrupt := func(what string, f func(c []byte) []byte) {
		t.Helper()
		c := f(append([]byte(nil), b...))
		if _, err := DecodeSolution(c); err == nil {
			t.Errorf("%s: no error", what)
		}
	}
	head := len(solMagic) + 1 + 3*8 + 2*4
	corrupt("version 2", func(c []byte) []byte { c[len(solMagic)] = 2; return c })
	corrupt("valid flag 7", func(c []byte) []byte { c[head+9*8] = 7; return c })
	corrupt("a byte after the last point", func(c []byte) []byte { return append(c, 0) })
	corrupt("a grid of 2^32-1 × 2^32-1 points", func(c []byte) []byte {
		copy(c[head-8:], []byte{255, 255, 255, 255, 255, 255, 255, 255})
		return c
	})
	corrupt("a reason length in two bytes", func(c []byte) []byte {
		c[head+9*8+1] = 0x80 // the first point's empty reason: 0 as 0x80 0x00
		return append(c[:head+9*8+2], append([]byte{0}, c[head+9*8+2:]...)...)
	})
	corrupt("a reason longer than the data", func(c []byte) []byte { c[head+9*8+1] = 127; return c })

	// The JSON of an earlier version: the same values, no reasons.
	one := &Solution{Grid: sol.Grid, Points: sol.Points[:1]}
	one.Grid.Nx = 1
	j, err := json.Marshal(one)
	if err != nil {
		t.Fatal(err)
	}
	if got, err := DecodeSolution(j); err != nil || !sameSolution(got, one) {
		t.Errorf("JSON form: %+v, %v", got, err)
	}
}

// TestSolvedStatus checks that a frame added from its solution, solved
// from the guess a sequential run uses, reports the same field as the
// frame added in sequence, invalid points' statuses included: a 14 px
// square blanked in the frame leaves points without a match, and the
// JSON form of a solution, which has no reasons, turned their
// "low_zncc" or "diverged" into "not_tracked".
func TestSolvedStatus(t *testing.T) {
	ref, imgs, p := solveSeries(t)
	img := blank(imgs[0], 60, 40, 14)
	ctx := context.Background()
	seq, err := New(ref, FrameMeta{Name: "ref"}, p)
	if err != nil {
		t.Fatal(err)
	}
	guess := &Solution{Grid: seq.st.Grid, Points: append([]PointState(nil), seq.st.Points...)}
	want, err := seq.Add(ctx, img, FrameMeta{})
	if err != nil {
		t.Fatal(err)
	}
	invalid := 0
	for _, s := range want.Field.Status {
		if s != "ok" {
			invalid++
		}
	}
	if invalid == 0 {
		t.Fatal("no point lost under the blanked square: the test checks nothing")
	}
	sol, err := Solve(ctx, ref, img, p, Options{}, guess, nil)
	if err != nil {
		t.Fatal(err)
	}
	b, err := sol.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	dec, err := DecodeSolution(b)
	if err != nil {
		t.Fatal(err)
	}
	tr, err := New(ref, FrameMeta{Name: "ref"}, p)
	if err != nil {
		t.Fatal(err)
	}
	if !tr.accepts(dec) {
		t.Fatal("the solution is not good enough to be used: the test checks nothing")
	}
	got, err := tr.AddSolved(ctx, img, FrameMeta{}, dec)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(got.Field.Status, want.Field.Status) {
		t.Errorf("statuses differ from the sequential frame's (%d points not ok)", invalid)
	}
	// The time the frame was added is the one field allowed to differ.
	got.Field.Meta.Created, want.Field.Meta.Created = time.Time{}, time.Time{}
	var gj, wj bytes.Buffer
	if err := field.WriteJSON(&gj, got.Field); err != nil {
		t.Fatal(err)
	}
	if err := field.WriteJSON(&wj, want.Field); err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(gj.Bytes(), wj.Bytes()) {
		g, w := gj.Bytes(), wj.Bytes()
		i := 0
		for i < min(len(g), len(w)) && g[i] == w[i] {
			i++
		}
		t.Errorf("field.json differs from the sequential frame's at byte %d: %.200s\nsequential %.200s", i, g[max(0, i-100):], w[max(0, i-100):])
	}
}

// FuzzSolutionBinary: any input is decoded or refused without a panic,
// and what decodes encodes back to the very same bytes (the form has one
// encoding per solution).
func FuzzSolutionBinary(f *testing.F) {
	sol := &Solution{Grid: lattice{X0: 1, Y0: 2, Step: 4, Nx: 2, Ny: 1}, Points: []PointState{
		{X: 1, Y: 2, F: [4]float64{1, 0, 0, 1}, ZNCC: 0.9, Valid: true}, {Reason: "diverged", ZNCC: math.NaN()}}}
	b, err := sol.MarshalBinary()
	if err != nil {
		f.Fatal(err)
	}
	f.Add(b)
	f.Add([]byte(solMagic))
	f.Fuzz(func(t *testing.T, b []byte) {
		var s Solution
		if s.UnmarshalBinary(b) != nil {
			return
		}
		again, err := s.MarshalBinary()
		if err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(again, b) {
			t.Errorf("decoded and encoded again: %x, was %x", again, b)
		}
	})
}

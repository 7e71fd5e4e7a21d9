package series

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"testing"
)

// TestFloatCodec checks the hand-written encoding of the state's float
// lists against encoding/json of the standard library (the bytes it
// writes for a []*float64 with nil for NaN and ±Inf, and the values it
// reads back), on values at the edges of its 'f'/'e' rule and on random
// ones, and that anything but a plain list of numbers and nulls decodes
// (or fails) as encoding/json does.
func TestFloatCodec(t *testing.T) {
	vals := []float64{0, math.Copysign(0, -1), 1, -1, 0.1, 1e-6, 9.999999e-7, -1e-7, 1e20, 1e21, -1e21, 1.5e300, 5e-324,
		math.MaxFloat64, math.SmallestNonzeroFloat64, 123456789.125, 1e-9, 3e-10, math.NaN(), math.Inf(1), math.Inf(-1)}
	r := rand.New(rand.NewPCG(1, 2))
	for range 2000 {
		vals = append(vals, math.Float64frombits(r.Uint64()), r.NormFloat64()*math.Pow(10, float64(r.IntN(40)-20)))
	}
	ref := make([]*float64, len(vals))
	for i := range vals {
		if !math.IsNaN(vals[i]) && !math.IsInf(vals[i], 0) {
			ref[i] = &vals[i]
		}
	}
	want, err := json.Marshal(ref)
	if err != nil {
		t.Fatal(err)
	}
	got, err := json.Marshal(nfloats(vals))
	if err != nil {
		t.Fatal(err)
	}
	if string(got) != string(want) {
		for i := range vals {
			w, _ := json.Marshal(ref[i])
			if g := appendFloat(nil, vals[i]); string(g) != string(w) {
				t.Errorf("%v encodes as %s, encoding/json writes %s", vals[i], g, w)
			}
		}
		t.Fatal("the float list differs from encoding/json's")
	}
	var back nfloats
	if err := json.Unmarshal(want, &back); err != nil {
		t.Fatal(err)
	}
	for i, v := range vals {
		ok := back[i] == v || math.Signbit(back[i]) == math.Signbit(v) && back[i] == v
		if !math.IsNaN(v) && !math.IsInf(v, 0) && (!ok || math.Signbit(back[i]) != math.Signbit(v)) {
			t.Errorf("%v reads back as %v", v, back[i])
		}
		if (math.IsNaN(v) || math.IsInf(v, 0)) && !math.IsNaN(back[i]) {
			t.Errorf("%v (written null) reads back as %v, want NaN", v, back[i])
		}
	}
	for _, c := range []struct {
		in string
		ok bool
	}{
		{`[]`, true}, {` [ 1 , null ,2e-3 ] `, true}, {`null`, true}, {`[1,"x"]`, false}, {`[1,]`, false},
		{`[1 2]`, false}, {`[true]`, false}, {`{}`, false}, {`[1e400]`, false}, {`[-]`, false}, {`[1]x`, false},
		{`[+1]`, false}, {`[.5]`, false}, {`[1.]`, false}, {`[01]`, false}, {`[-01]`, false}, {`[1e]`, false}, {`[1e+]`, false},
		{`[--1]`, false}, {`[0.5e-3, -0, 0E+2]`, true}, {`[1.5E3]`, true},
	} {
		var f nfloats
		err := f.UnmarshalJSON([]byte(c.in))
		var p []*float64
		jerr := json.Unmarshal([]byte(c.in), &p)
		if (err == nil) != c.ok || (jerr == nil) != c.ok {
			t.Errorf("%s: error %v, encoding/json %v, want ok %v", c.in, err, jerr, c.ok)
			continue
		}
		if err == nil && len(f) != len(p) {
			t.Errorf("%s: %d values, encoding/json %d", c.in, len(f), len(p))
		}
	}
}

// FuzzFloatCodec checks that the hand-written decoder of the state's float
// lists accepts exactly what encoding/json accepts for a []*float64 and
// reads the same values (null as NaN), and that a decoded list encodes
// back to the bytes encoding/json writes for it.
func FuzzFloatCodec(f *testing.F) {
	for _, s := range []string{`[]`, `[1,null,-2.5e-7]`, `[+1]`, `[.5]`, `[01]`, `[1e400]`, `null`, ` [ 0 , -0 ] `, `[1,]`, `[1e-9,1e21]`} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		got, err := decodeFloats(b, nil)
		var p []*float64
		jerr := json.Unmarshal(b, &p)
		if (err == nil) != (jerr == nil) {
			t.Fatalf("%q: decodeFloats error %v, encoding/json %v", b, err, jerr)
		}
		if err != nil {
			return
		}
		if len(got) != len(p) {
			t.Fatalf("%q: %d values, encoding/json %d", b, len(got), len(p))
		}
		for i, v := range p {
			if v == nil && !math.IsNaN(got[i]) || v != nil && (got[i] != *v || math.Signbit(got[i]) != math.Signbit(*v)) {
				t.Fatalf("%q: value %d is %v, encoding/json reads %v", b, i, got[i], v)
			}
		}
		want, err := json.Marshal(p)
		if err != nil {
			t.Fatal(err)
		}
		if len(p) == 0 {
			want = []byte("[]")
		}
		if enc := appendFloats(nil, got); string(enc) != string(want) {
			t.Fatalf("%q: encodes as %s, encoding/json writes %s", b, enc, want)
		}
	})
}

package series

import (
	"math"
	"strings"
	"testing"
)

func TestReadTable(t *testing.T) {
	tests := []struct {
		name, csv string
		index     int
		frame     string
		at        *float64
		wantT     float64 // NaN = nil
		wantL     float64
	}{
		{"by frame", "frame,time_s,load_N\n0,0,0\n1,0.5,120\n2,1.0,240\n", 2, "", nil, 1.0, 240},
		{"by name, kN", "file,force_kN\nimg_000.png,0\nimg_001.png,1.5\n", 1, "/x/img_001.png", nil, math.NaN(), 1500},
		{"by time", "time_s,load_N\n0,0\n1,100\n3,300\n", 5, "", ptrTo(2.0), math.NaN(), 200},
		{"ms", "index,time_ms\n0,0\n1,250\n", 1, "", nil, 0.25, math.NaN()},
		{"missing", "frame,load\n0,0\n", 3, "", nil, math.NaN(), math.NaN()},
	}
	for _, tc := range tests {
		tb, err := ReadTable(strings.NewReader(tc.csv), tc.name)
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		tm, l, err := tb.Lookup(tc.index, tc.frame, tc.at)
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		check := func(what string, got *float64, want float64) {
			if math.IsNaN(want) != (got == nil) || got != nil && math.Abs(*got-want) > 1e-12 {
				t.Errorf("%s: %s = %v, want %g", tc.name, what, got, want)
			}
		}
		check("time", tm, tc.wantT)
		check("load", l, tc.wantL)
	}
}

func ptrTo(v float64) *float64 { return &v }

func TestReadTableErrors(t *testing.T) {
	for _, c := range []struct{ csv, want string }{
		{"a,b\n1,2\n", "no key column"},
		{"frame,colour\n1,red\n", "neither a time nor a load"},
		{"frame,load\nx,2\n", "not a non-negative integer"},
		{"frame,load\n1,abc\n", "not a number"},
		{"frame,load\n1,2\n1,3\n", "listed twice"},
		{"frame,load\n", "at least one data row"},
		{"time,load\n1,2\n1,3\n", "appears twice"},
	} {
		_, err := ReadTable(strings.NewReader(c.csv), "t.csv")
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%q: error %v, want %q", c.csv, err, c.want)
		}
	}
	tb, _ := ReadTable(strings.NewReader("time,load\n0,0\n1,1\n"), "t.csv")
	if _, _, err := tb.Lookup(1, "", ptrTo(2)); err == nil {
		t.Error("extrapolation accepted")
	}
}

func TestTimesFromNames(t *testing.T) {
	got, err := TimesFromNames([]string{"a/spec_t0.000s.png", "spec_t0.125s.png", "spec_t1.5s.tif"}, `_t([0-9.]+)s`, 1)
	if err != nil {
		t.Fatal(err)
	}
	for i, w := range []float64{0, 0.125, 1.5} {
		if got[i] != w {
			t.Errorf("time %d = %g, want %g", i, got[i], w)
		}
	}
	if _, err := TimesFromNames([]string{"x.png"}, `_t([0-9.]+)s`, 1); err == nil {
		t.Error("non-matching name accepted")
	}
	if _, err := TimesFromNames([]string{"x.png"}, `x`, 1); err == nil {
		t.Error("pattern without group accepted")
	}
	if err := CheckTimes([]string{"a", "b"}, []float64{1, 1}); err == nil {
		t.Error("equal times accepted")
	}
}

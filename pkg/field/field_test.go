package field

import (
	"encoding/json"
	"math"
	"reflect"
	"strings"
	"testing"
	"time"
)

// sample returns a 5×3 field with a few quantities, NaN holes and statuses.
func sample(t testing.TB) *Field {
	t.Helper()
	f := New(5, 3, 16, 20, 8, 31)
	n := f.Grid.Len()
	mk := func(fn func(p int) float64) []float64 {
		q := make([]float64, n)
		for p := range q {
			q[p] = fn(p)
		}
		return q
	}
	must := func(err error) {
		if err != nil {
			t.Fatal(err)
		}
	}
	must(f.Set("u", "px", mk(func(p int) float64 { return 0.1*float64(p) + 1.0/3 })))
	must(f.Set("v", "px", mk(func(p int) float64 { return -0.05 * float64(p) })))
	must(f.Set("E11", "1", mk(func(p int) float64 { return 1e-3 * math.Sin(float64(p)) })))
	must(f.Set("rotation_deg", "deg", mk(func(p int) float64 { return float64(p) * 1e-17 })))
	must(f.Set("custom_b", "1", mk(func(p int) float64 { return math.MaxFloat64 / float64(p+1) })))
	must(f.Set("custom_a", "1", mk(func(p int) float64 { return -float64(p) })))
	must(f.Set("valid", "1", mk(func(p int) float64 { return 1 })))
	for _, p := range []int{4, 7} {
		for _, name := range []string{"u", "v", "E11", "rotation_deg"} {
			f.Quantities[name][p] = math.NaN()
		}
		f.Quantities["valid"][p] = 0
		f.Status[p] = "low_zncc"
	}
	f.Quantities["E11"][9] = math.Inf(1)
	f.Status[9] = "non_invertible"
	f.Params = json.RawMessage(`{"subset": 31, "step": 8, "shape": "first"}`)
	f.Meta = Meta{Software: "mottle test", Created: time.Date(2024, 3, 1, 12, 0, 0, 0, time.UTC),
		Reference: "ref.png", Deformed: "def.png", ImageWidth: 64, ImageHeight: 48,
		NoiseSigma: 1.25, VSG: 63, StrainWindow: 5, StrainFit: "plane", PrincipalOf: "green_lagrange",
		Cautions: Cautions(), Extra: map[string]any{"specimen": "BML-invented-01"}}
	return f
}

func TestNames(t *testing.T) {
	f := sample(t)
	want := []string{"u", "v", "E11", "rotation_deg", "valid", "custom_a", "custom_b"}
	if got := f.Names(); !reflect.DeepEqual(got, want) {
		t.Errorf("Names() = %v, want %v", got, want)
	}
	if _, ok := f.Get("u"); !ok {
		t.Error("Get(u) missing")
	}
	if _, ok := f.Get("nope"); ok {
		t.Error("Get(nope) found")
	}
	for _, n := range CanonicalNames() {
		if Describe(n) == "" {
			t.Errorf("no description for %q", n)
		}
	}
}

// Mean and sample standard deviation of 1, 2, 3, 4 (NaN and Inf ignored):
// mean 2.5, s = √(5/3) (definition of the sample standard deviation).
func TestSummary(t *testing.T) {
	s := Summarize([]float64{1, math.NaN(), 2, 3, math.Inf(-1), 4})
	if s.Count != 4 || s.Mean != 2.5 || math.Abs(s.Std-math.Sqrt(5.0/3)) > 1e-15 || s.Min != 1 || s.Max != 4 {
		t.Errorf("Summarize = %+v", s)
	}
	if s := Summarize([]float64{math.NaN()}); s.Count != 0 || !math.IsNaN(s.Mean) {
		t.Errorf("Summarize(all NaN) = %+v", s)
	}
	if s := Summarize([]float64{7}); s.Count != 1 || s.Mean != 7 || s.Std != 0 {
		t.Errorf("Summarize(7) = %+v", s)
	}
	f := sample(t)
	if _, err := f.Summary("absent"); err == nil {
		t.Error("Summary(absent): want error")
	}
	if s, err := f.Summary("valid"); err != nil || s.Count != 15 || s.Mean != 13.0/15 {
		t.Errorf("Summary(valid) = %+v, %v", s, err)
	}
	if c := f.StatusCounts(); c["ok"] != 12 || c["low_zncc"] != 2 || c["non_invertible"] != 1 {
		t.Errorf("StatusCounts = %v", c)
	}
}

func TestValidate(t *testing.T) {
	f := sample(t)
	if err := f.Validate(); err != nil {
		t.Fatal(err)
	}
	f.Quantities["u"] = f.Quantities["u"][:3]
	f.Quantities["bad name"] = make([]float64, 15)
	f.Quantities["status"] = make([]float64, 15)
	f.Status = f.Status[:2]
	f.Meta.NoiseSigma = math.NaN()
	f.Grid.X = f.Grid.X[:1]
	f.Params = json.RawMessage("{oops")
	err := f.Validate()
	if err == nil {
		t.Fatal("want error")
	}
	for _, s := range []string{`"u": 3 values`, `"bad name"`, `"status": reserved`, "status: 2 entries", "noise_sigma NaN", "grid coordinates", "params"} {
		if !strings.Contains(err.Error(), s) {
			t.Errorf("error %q does not mention %q", err, s)
		}
	}
	if err := New(2, 2, 0, 0, 1, 1).Set("u", "px", []float64{1}); err == nil {
		t.Error("Set with wrong length: want error")
	}
}

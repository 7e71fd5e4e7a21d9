package series

import (
	"errors"
	"reflect"
	"testing"

	"github.com/mottledic/mottle/pkg/analysis"
)

// One parser for the flat (service) and nested (CLI file, state.json)
// parameter documents; problems name their field as data.
func TestParseParams(t *testing.T) {
	flat := `{"subset": 25, "step": 6, "incremental": "never", "area_mm2": 12, "extensometers": [{"name": "x", "a": [10, 20], "b": [90, 20]}]}`
	nested := `{"analysis": {"subset": 25, "step": 6}, "incremental": "never", "area_mm2": 12, "extensometers": [{"name": "x", "a": [10, 20], "b": [90, 20]}]}`
	a, err := ParseParams([]byte(flat))
	if err != nil {
		t.Fatal(err)
	}
	b, err := ParseParams([]byte(nested))
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(a, b) || a.Analysis.Subset != 25 || a.Incremental != IncrementalNever || a.Analysis.Interpolation != Defaults().Analysis.Interpolation {
		t.Fatalf("flat %+v\nnested %+v", a, b)
	}
	doc, err := a.FlatJSON()
	if err != nil {
		t.Fatal(err)
	}
	c, err := ParseParams(doc)
	if err != nil || !reflect.DeepEqual(a, c) {
		t.Fatalf("FlatJSON round trip: %+v (%v)", c, err)
	}
	for _, k := range []string{"incremental", "switch_zncc", "extensometers", "gauges", "area_mm2", "properties"} {
		found := false
		for _, got := range Keys() {
			found = found || got == k
		}
		if !found {
			t.Errorf("Keys() %v lacks %s", Keys(), k)
		}
	}
	cases := []struct {
		doc    string
		fields []string
	}{
		{`{"gauge": []}`, []string{"gauge"}},
		{`{"switch_zncc": "high"}`, []string{"switch_zncc"}},
		{`{"subset": 21, "analysis": {"subset": 23}}`, []string{"subset"}},
		{`{"analysis": 3}`, []string{"analysis"}},
		{`[1, 2]`, []string{""}},
	}
	for _, tc := range cases {
		_, err := ParseParams([]byte(tc.doc))
		var ve *analysis.ValidationError
		if !errors.As(err, &ve) {
			t.Errorf("%s: error %v, want a ValidationError", tc.doc, err)
			continue
		}
		var got []string
		for _, q := range ve.Problems {
			got = append(got, q.Field)
		}
		if !reflect.DeepEqual(got, tc.fields) {
			t.Errorf("%s: fields %q, want %q (%v)", tc.doc, got, tc.fields, err)
		}
	}
	// Validate names every field at fault.
	p := Defaults()
	p.Incremental, p.Units, p.Area = "sometimes", "inch", -1
	p.Gauges = []Gauge{{Name: "g"}}
	p.Properties.Axial = "nope"
	var ve *analysis.ValidationError
	if err := p.Validate(200, 200); !errors.As(err, &ve) {
		t.Fatalf("Validate: %v", err)
	}
	want := map[string]bool{"incremental": true, "units": true, "area_mm2": true, "gauges[0]": true, "properties.axial": true}
	for _, q := range ve.Problems {
		delete(want, q.Field)
	}
	if len(want) > 0 {
		t.Errorf("Validate did not name %v: %v", want, ve)
	}
}

package analysis

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"reflect"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/kinematics"
	"github.com/mottledic/mottle/pkg/roi"
)

func TestDefaultsValid(t *testing.T) {
	p := Defaults()
	if err := p.Validate(512, 512); err != nil {
		t.Fatalf("defaults should be valid for a 512×512 image: %v", err)
	}
}

// TestValidateNamesEveryProblem checks that each bad value is reported
// against its own field, and that several problems are reported at once.
func TestValidateNamesEveryProblem(t *testing.T) {
	rect := [4]int{-5, 0, 100, 100}
	cases := []struct {
		name   string
		edit   func(*Params)
		w, h   int
		fields []string
	}{
		{"even subset", func(p *Params) { p.Subset = 30 }, 256, 256, []string{"subset"}},
		{"subset larger than image", func(p *Params) { p.Subset = 101 }, 64, 64, []string{"subset"}},
		{"bad shape and fit", func(p *Params) { p.Shape = "third"; p.StrainFit = "cubic" }, 256, 256, []string{"shape", "strain_fit"}},
		{"roi outside image", func(p *Params) { p.ROI = &roi.Spec{Rect: &rect} }, 256, 256, []string{"roi.rect"}},
		{"seed at edge", func(p *Params) { p.Seeds = [][2]int{{2, 2}} }, 256, 256, []string{"seeds[0]"}},
		{"even window", func(p *Params) { p.StrainWindow = 4 }, 256, 256, []string{"strain_window"}},
		{"negative scale", func(p *Params) { p.MMPerPx = -1 }, 256, 256, []string{"mm_per_px"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			p := Defaults()
			c.edit(&p)
			err := p.Validate(c.w, c.h)
			var ve *ValidationError
			if !errors.As(err, &ve) {
				t.Fatalf("want a *ValidationError, got %v", err)
			}
			got := map[string]bool{}
			for _, pr := range ve.Problems {
				got[pr.Field] = true
				if pr.Message == "" {
					t.Errorf("field %s: empty message", pr.Field)
				}
			}
			for _, f := range c.fields {
				if !got[f] {
					t.Errorf("no problem reported for %s; got %v", f, ve.Problems)
				}
			}
			if len(ve.Problems) != len(c.fields) {
				t.Errorf("got %d problems, want %d: %v", len(ve.Problems), len(c.fields), ve.Problems)
			}
		})
	}
}

func TestParseJSON(t *testing.T) {
	p, err := ParseJSONBytes([]byte(`{"subset": 21, "step": 5}`))
	if err != nil {
		t.Fatal(err)
	}
	if p.Subset != 21 || p.Step != 5 || p.Shape != "first" {
		t.Errorf("got %+v; want subset 21, step 5 and the default shape", p)
	}
	_, err = ParseJSONBytes([]byte(`{"subsett": 21}`))
	var ve *ValidationError
	if !errors.As(err, &ve) || ve.Problems[0].Field != "subsett" || !strings.Contains(ve.Problems[0].Message, "subset") {
		t.Errorf("unknown field: want a problem naming it and listing known ones, got %v", err)
	}
	// A value of the wrong JSON type names the field and the JSON kind
	// wanted, not a Go type (it said "expected a int").
	for _, tc := range []struct{ in, field, want string }{
		{`{"subset": "big"}`, "subset", "expected a whole number, got a JSON string"},
		{`{"min_zncc": "high"}`, "min_zncc", "expected a number, got a JSON string"},
		{`{"shape": 2}`, "shape", "expected a string, got a JSON number"},
		{`{"seeds": 5}`, "seeds", "expected a list ([…]), got a JSON number"},
	} {
		_, err = ParseJSONBytes([]byte(tc.in))
		if !errors.As(err, &ve) || ve.Problems[0].Field != tc.field || ve.Problems[0].Message != tc.want {
			t.Errorf("%s: got %v; want a problem on %s saying %q", tc.in, err, tc.field, tc.want)
		}
	}
	if _, err = ParseJSONBytes([]byte(`{"subset": 21`)); err == nil {
		t.Error("truncated JSON accepted")
	}
}

// FuzzParseJSON: parameters that ParseJSONBytes accepts are written back
// as JSON (json.Marshal, as the service stores them) and parsed again to
// the same parameters (empty lists are written as absent, so they come
// back as nil), the JSON written is a fixed point, and Validate gives the
// same verdict on both.
func FuzzParseJSON(f *testing.F) {
	f.Add([]byte(`{"subset": 31, "roi": {"rect": [0, 0, 10, 10]}}`))
	f.Add([]byte(`{"seeds": [[1, 2]], "scale_points": {"a": [0, 0], "b": [1, 1], "distance_mm": 0}}`))
	f.Add([]byte(`{"roi": {"polygon": [[0, 0], [1e308, 1], [2, 2]], "holes": [[[1, 1]]]}}`))
	f.Fuzz(func(t *testing.T, b []byte) {
		p, err := ParseJSONBytes(b)
		if err != nil {
			return
		}
		w1, err := json.Marshal(p)
		if err != nil {
			t.Fatalf("cannot write back parameters that were read: %v", err)
		}
		p2, err := ParseJSONBytes(w1)
		if err != nil {
			t.Fatalf("cannot read the parameters written back: %v\n%s", err, w1)
		}
		if want := withoutEmptyLists(p); !reflect.DeepEqual(want, p2) {
			t.Fatalf("parameters read back differ:\n%+v\n%+v\n(written %s)", want, p2, w1)
		}
		if w2, err := json.Marshal(p2); err != nil || !bytes.Equal(w1, w2) {
			t.Fatalf("writing the parameters read back gives other JSON (%v):\n%s\n%s", err, w1, w2)
		}
		for _, size := range [][2]int{{300, 200}, {0, 0}} {
			e1, e2 := p.Validate(size[0], size[1]), p2.Validate(size[0], size[1])
			if fmt.Sprint(e1) != fmt.Sprint(e2) {
				t.Fatalf("Validate(%d, %d) differs after the round trip: %v, then %v", size[0], size[1], e1, e2)
			}
		}
	})
}

// withoutEmptyLists returns p with its empty (non-nil) lists set to nil:
// json.Marshal leaves them out (omitempty), so they read back as nil.
func withoutEmptyLists(p Params) Params {
	if len(p.Seeds) == 0 {
		p.Seeds = nil
	}
	if p.ROI != nil {
		r := *p.ROI
		if len(r.Polygon) == 0 {
			r.Polygon = nil
		}
		if len(r.Holes) == 0 {
			r.Holes = nil
		}
		p.ROI = &r
	}
	return p
}

// TestOneSetOfDefaults checks that the analysis defaults are the
// correlator's and the strain fit's (issue 13: one set of defaults): the
// options built from analysis.Defaults equal correlate.Defaults in every
// field the parameters carry, the parameter limits are the correlator's,
// and the strain window is kinematics'. The values are the project's
// choices (common practice), so the check is that there is one source.
func TestOneSetOfDefaults(t *testing.T) {
	d := Defaults()
	got, err := CorrelationOptions(d, 64, 64, nil)
	if err != nil {
		t.Fatal(err)
	}
	want := correlate.Defaults()
	type key struct {
		Subset, Step, Search, MaxIter int
		MinZNCC, Tol                  float64
		Shape                         correlate.Shape
	}
	g := key{got.Subset, got.Step, got.Search, got.MaxIter, got.MinZNCC, got.Tol, got.Shape}
	w := key{want.Subset, want.Step, want.Search, want.MaxIter, want.MinZNCC, want.Tol, want.Shape}
	if g != w || got.Interp != want.Interp {
		t.Errorf("options from analysis.Defaults %+v (interp %v), correlate.Defaults %+v (interp %v)", g, got.Interp, w, want.Interp)
	}
	if d.StrainWindow != kinematics.DefaultWindow {
		t.Errorf("strain window %d, kinematics.DefaultWindow %d", d.StrainWindow, kinematics.DefaultWindow)
	}
	// The limits: the largest value analysis accepts passes the
	// correlator's check, and one more fails it.
	for _, c := range []struct {
		name string
		set  func(o *correlate.Options, v int)
		max  int
	}{
		{"max_iterations", func(o *correlate.Options, v int) { o.MaxIter = v }, MaxIterations},
		{"search", func(o *correlate.Options, v int) { o.Search = v }, MaxSearch},
		{"subset", func(o *correlate.Options, v int) { o.Subset = v }, MaxSubset},
	} {
		o := correlate.Defaults()
		c.set(&o, c.max)
		if err := o.Validate(); err != nil {
			t.Errorf("%s = %d, the analysis limit: correlate refuses it: %v", c.name, c.max, err)
		}
		c.set(&o, c.max+2)
		if err := o.Validate(); err == nil {
			t.Errorf("%s = %d, past the analysis limit: correlate accepts it", c.name, c.max+2)
		}
	}
}

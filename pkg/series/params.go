package series

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"reflect"
	"sort"
	"strings"

	"github.com/mottledic/mottle/pkg/analysis"
)

// Keys returns the JSON names of the series-engine parameters (those of
// Params other than "analysis"), sorted, read from the struct tags.
func Keys() []string {
	var out []string
	t := reflect.TypeOf(Params{})
	for i := range t.NumField() {
		name, _, _ := strings.Cut(t.Field(i).Tag.Get("json"), ",")
		if name != "" && name != "-" && name != "analysis" {
			out = append(out, name)
		}
	}
	sort.Strings(out)
	return out
}

// ParseParams reads a series parameter document over Defaults(). It takes
// the flat form of the service (analysis and series-engine parameters side
// by side at the top level) and the nested form of a --params file and
// state.json (analysis parameters under "analysis"), or a mix. Which key is
// which comes from the struct tags of Params and analysis.Params, so the
// two lists cannot drift apart. Every problem comes back at once in an
// *analysis.ValidationError whose problems carry the field they are about
// (Field "" for a document that is not a JSON object). It does not call
// Validate.
func ParseParams(raw []byte) (Params, error) {
	p := Defaults()
	if len(bytes.TrimSpace(raw)) == 0 {
		return p, nil
	}
	bad := func(field, format string, a ...any) error {
		return &analysis.ValidationError{Problems: []analysis.Problem{{Field: field, Message: fmt.Sprintf(format, a...)}}}
	}
	var top map[string]json.RawMessage
	if err := json.Unmarshal(raw, &top); err != nil || top == nil {
		return p, bad("", "the parameters are not a JSON object (%v); send e.g. {\"subset\": 31, \"gauges\": [{\"name\": \"g1\", \"rect\": [20, 20, 100, 100]}]}", err)
	}
	series := map[string]bool{}
	for _, k := range Keys() {
		series[k] = true
	}
	base, _ := json.Marshal(p.Analysis)
	am := map[string]json.RawMessage{}
	_ = json.Unmarshal(base, &am)
	sm := map[string]json.RawMessage{}
	var ps []analysis.Problem
	if nested, ok := top["analysis"]; ok {
		var inner map[string]json.RawMessage
		if err := json.Unmarshal(nested, &inner); err != nil || inner == nil {
			return p, bad("analysis", "must be a JSON object of analysis parameters, e.g. {\"subset\": 31}")
		}
		for k, v := range inner {
			if _, dup := top[k]; dup {
				ps = append(ps, analysis.Problem{Field: k, Message: "is given both at the top level and inside analysis; give it once"})
			}
			am[k] = v
		}
		delete(top, "analysis")
	}
	for k, v := range top {
		if series[k] {
			sm[k] = v
		} else {
			am[k] = v
		}
	}
	ab, _ := json.Marshal(am)
	a, err := analysis.ParseJSONBytes(ab)
	if err != nil {
		var ve *analysis.ValidationError
		if !errors.As(err, &ve) {
			return p, bad("", "%v", err)
		}
		for _, q := range ve.Problems {
			if strings.HasPrefix(q.Message, "unknown parameter") {
				q.Message += "; series parameters are " + strings.Join(Keys(), ", ")
			}
			ps = append(ps, q)
		}
	}
	sb, _ := json.Marshal(sm)
	dec := json.NewDecoder(bytes.NewReader(sb))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&p); err != nil {
		var ute *json.UnmarshalTypeError
		if errors.As(err, &ute) {
			ps = append(ps, analysis.Problem{Field: ute.Field, Message: fmt.Sprintf("expected %s, got a JSON %s", analysis.JSONKind(ute.Type), ute.Value)})
		} else {
			ps = append(ps, analysis.Problem{Field: "", Message: err.Error()})
		}
	}
	p.Analysis = a
	if len(ps) > 0 {
		sort.SliceStable(ps, func(i, j int) bool { return ps[i].Field < ps[j].Field })
		return p, &analysis.ValidationError{Problems: ps}
	}
	return p, nil
}

// FlatJSON encodes p in the flat form: the analysis parameters and the
// series-engine parameters side by side at the top level. ParseParams
// reads it back to p; analysis.ParseJSON of it fails on the series keys.
func (p Params) FlatJSON() ([]byte, error) {
	am := map[string]json.RawMessage{}
	sm := map[string]json.RawMessage{}
	ab, err := json.Marshal(p.Analysis)
	if err != nil {
		return nil, err
	}
	sb, err := json.Marshal(p)
	if err != nil {
		return nil, err
	}
	if err := errors.Join(json.Unmarshal(ab, &am), json.Unmarshal(sb, &sm)); err != nil {
		return nil, err
	}
	delete(sm, "analysis")
	for k, v := range sm {
		am[k] = v
	}
	return json.Marshal(am)
}

package service

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"strings"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/series"
)

// seriesKeys are the parameters of a series that belong to the series
// engine (pkg/series.Params) rather than to the correlation
// (pkg/analysis.Params). In the service's parameter document both sit at
// the top level; the CLI's nested form {"analysis": {...}, ...} is accepted
// too.
var seriesKeys = map[string]bool{
	"incremental": true, "switch_zncc": true, "switch_valid": true, "return_direct": true, "units": true,
	"extensometers": true, "gauges": true, "area_mm2": true, "static_frames": true, "properties": true,
}

// parseSeriesParams reads the parameter document of a new series: analysis
// parameters and series-engine parameters side by side, each missing one
// taking its default from series.Defaults. It returns every problem as a
// field-level error (*analysis.ValidationError or *FieldError).
func (s *Server) parseSeriesParams(raw []byte, w, h int) (series.Params, error) {
	p := series.Defaults()
	var top map[string]json.RawMessage
	if len(bytes.TrimSpace(raw)) > 0 {
		if err := json.Unmarshal(raw, &top); err != nil {
			return p, problem(http.StatusBadRequest, "bad-params", "Malformed parameters", "parameters are not a JSON object: "+err.Error(),
				FieldProblem{"params", `send a JSON object such as {"subset": 31, "step": 8, "gauges": [{"name": "g1", "rect": [20, 20, 100, 100]}]}`})
		}
	}
	base, _ := json.Marshal(p.Analysis)
	am := map[string]json.RawMessage{}
	_ = json.Unmarshal(base, &am)
	sm := map[string]json.RawMessage{}
	if nested, ok := top["analysis"]; ok {
		var inner map[string]json.RawMessage
		if err := json.Unmarshal(nested, &inner); err != nil {
			return p, &FieldError{Field: "params.analysis", Detail: "must be a JSON object of analysis parameters, e.g. {\"subset\": 31}"}
		}
		for k, v := range inner {
			if _, dup := top[k]; dup {
				return p, &FieldError{Field: "params." + k, Detail: "is given both at the top level and inside analysis; give it once"}
			}
			am[k] = v
		}
		delete(top, "analysis")
	}
	for k, v := range top {
		if seriesKeys[k] {
			sm[k] = v
		} else {
			am[k] = v
		}
	}
	ab, _ := json.Marshal(am)
	a, err := analysis.ParseJSONBytes(ab)
	if err != nil {
		var ve *analysis.ValidationError
		if errors.As(err, &ve) {
			for i, q := range ve.Problems {
				if strings.HasPrefix(q.Message, "unknown parameter") {
					ve.Problems[i].Message += "; series parameters are " + strings.Join(sortedKeys(seriesKeys), ", ")
				}
			}
			return p, ve
		}
		return p, problem(http.StatusBadRequest, "bad-params", "Malformed parameters", err.Error(),
			FieldProblem{"params", "send a JSON object such as {\"subset\": 31, \"step\": 8}"})
	}
	sb, _ := json.Marshal(sm)
	dec := json.NewDecoder(bytes.NewReader(sb))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&p); err != nil {
		var ute *json.UnmarshalTypeError
		if errors.As(err, &ute) {
			return p, &FieldError{Field: "params." + ute.Field, Detail: fmt.Sprintf("expected %s, got a JSON %s", analysis.JSONKind(ute.Type), ute.Value)}
		}
		return p, &FieldError{Field: "params", Detail: err.Error()}
	}
	p.Analysis = a
	if err := p.Validate(w, h); err != nil {
		var ve *analysis.ValidationError
		if errors.As(err, &ve) {
			return p, ve
		}
		return p, &FieldError{Field: "params." + leadingName(err.Error()), Detail: err.Error()}
	}
	if err := s.checkPoints(p.Analysis, w, h); err != nil {
		return p, err
	}
	return p, nil
}

// leadingName returns the parameter name an error message of
// series.Params.Validate starts with ("gauges[0] …" gives "gauges").
func leadingName(msg string) string {
	end := strings.IndexAny(msg, " [:.\n")
	if end <= 0 {
		return ""
	}
	return msg[:end]
}

// flatSeriesParams encodes p as the service's flat parameter document: the
// analysis parameters and the series-engine parameters at the top level.
// It decodes into analysis.Params (extra keys ignored) as well as through
// decodeSeriesParams.
func flatSeriesParams(p series.Params) ([]byte, error) {
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
	if err := json.Unmarshal(ab, &am); err != nil {
		return nil, err
	}
	if err := json.Unmarshal(sb, &sm); err != nil {
		return nil, err
	}
	delete(sm, "analysis")
	for k, v := range sm {
		am[k] = v
	}
	return json.Marshal(am)
}

// decodeSeriesParams reads a document written by flatSeriesParams.
func decodeSeriesParams(b []byte) (series.Params, error) {
	var p series.Params
	if err := json.Unmarshal(b, &p.Analysis); err != nil {
		return p, fmt.Errorf("stored series parameters: %w", err)
	}
	var m map[string]json.RawMessage
	if err := json.Unmarshal(b, &m); err != nil {
		return p, fmt.Errorf("stored series parameters: %w", err)
	}
	for k := range m {
		if !seriesKeys[k] {
			delete(m, k)
		}
	}
	sb, _ := json.Marshal(m)
	if err := json.Unmarshal(sb, &p); err != nil {
		return p, fmt.Errorf("stored series parameters: %w", err)
	}
	return p, nil
}

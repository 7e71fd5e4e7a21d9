package service

import (
	"bytes"
	"encoding/json"
	"errors"
	"net/http"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/runner"
	"github.com/mottledic/mottle/pkg/series"
)

// parseSeriesParams reads the parameter document of a new series with the
// one series-parameter parser (series.ParseParams: flat or nested, each
// missing parameter taking its default from series.Defaults) and checks it
// for w×h images. Problems come back as field-level errors
// (*analysis.ValidationError, whose problems carry their field names) or
// a 400 problem for a document that is not a JSON object.
func (s *Server) parseSeriesParams(raw []byte, w, h int) (series.Params, error) {
	if len(bytes.TrimSpace(raw)) > 0 {
		var top map[string]json.RawMessage
		if err := json.Unmarshal(raw, &top); err != nil {
			return series.Params{}, problem(http.StatusBadRequest, "bad-params", "Malformed parameters", "parameters are not a JSON object: "+err.Error(),
				FieldProblem{"params", `send a JSON object such as {"subset": 31, "step": 8, "gauges": [{"name": "g1", "rect": [20, 20, 100, 100]}]}`})
		}
	}
	p, err := series.ParseParams(raw)
	if err == nil {
		err = p.Validate(w, h)
	}
	if err != nil {
		var ve *analysis.ValidationError
		if errors.As(err, &ve) {
			for i := range ve.Problems {
				if ve.Problems[i].Field == "" {
					ve.Problems[i].Field = "document"
				}
			}
			return p, ve
		}
		return p, &FieldError{Field: "params", Detail: err.Error()}
	}
	if err := s.checkPoints(p.Analysis, w, h); err != nil {
		return p, err
	}
	return p, nil
}

// flatSeriesParams encodes p as the service's flat parameter document.
func flatSeriesParams(p series.Params) ([]byte, error) { return p.FlatJSON() }

// decodeSeriesParams reads a document written by flatSeriesParams.
func decodeSeriesParams(b []byte) (series.Params, error) { return runner.DecodeSeriesParams(b) }

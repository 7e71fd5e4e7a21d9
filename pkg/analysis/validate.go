package analysis

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"reflect"
	"sort"
	"strings"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/kinematics"
)

// Problem is one thing wrong with a parameter: which field (its JSON name),
// what is wrong and what would work.
type Problem struct {
	Field   string `json:"field"`
	Message string `json:"message"`
}

// ValidationError lists every problem found in a set of parameters. The
// service turns it into an RFC 9457 problem document with field-level detail.
type ValidationError struct {
	Problems []Problem
}

// Error joins the problems into one line per field.
func (e *ValidationError) Error() string {
	parts := make([]string, len(e.Problems))
	for i, p := range e.Problems {
		parts[i] = p.Field + ": " + p.Message
	}
	return "invalid parameters: " + strings.Join(parts, "; ")
}

// Defaults returns the parameters used where the caller sets none: subset
// 31 px, step 8 px, first-order shape function, cubic B-spline, search
// radius 40 px, ZNCC threshold 0.8, 50 iterations, tolerance 1e-4 px,
// strain window 5 points with a plane fit.
func Defaults() Params {
	// One set of defaults: the correlator's (correlate.Defaults) and the
	// strain fit's (kinematics.DefaultWindow, plane).
	c := correlate.Defaults()
	return Params{
		Subset:        c.Subset,
		Step:          c.Step,
		Shape:         "first",
		Interpolation: "cubic",
		Search:        c.Search,
		MinZNCC:       c.MinZNCC,
		MaxIter:       c.MaxIter,
		Tolerance:     c.Tol,
		StrainWindow:  kinematics.DefaultWindow,
		StrainFit:     "plane",
	}
}

// Limits on parameters, so that a request cannot ask for unbounded work.
const (
	MaxSubset       = correlate.MaxSubset
	MaxSearch       = correlate.MaxSearch
	MaxIterations   = correlate.MaxMaxIter
	MaxStrainWindow = 51
	MaxSeeds        = 64
	MaxThreads      = 1024
)

// JSONKind names what JSON value a Go type takes, for error messages read
// by people who write JSON, not Go ("a whole number", not "int").
func JSONKind(t reflect.Type) string {
	if t == nil {
		return "another value"
	}
	switch t.Kind() {
	case reflect.Int, reflect.Int8, reflect.Int16, reflect.Int32, reflect.Int64,
		reflect.Uint, reflect.Uint8, reflect.Uint16, reflect.Uint32, reflect.Uint64:
		return "a whole number"
	case reflect.Float32, reflect.Float64:
		return "a number"
	case reflect.String:
		return "a string"
	case reflect.Bool:
		return "true or false"
	case reflect.Slice, reflect.Array:
		return "a list ([…])"
	case reflect.Struct, reflect.Map:
		return "an object ({…})"
	case reflect.Pointer:
		return JSONKind(t.Elem())
	}
	return "another value"
}

// ParseJSON reads parameters from JSON over the defaults: fields not given
// keep their default values, unknown fields are an error that names them.
func ParseJSON(r io.Reader) (Params, error) {
	p := Defaults()
	dec := json.NewDecoder(r)
	dec.DisallowUnknownFields()
	if err := dec.Decode(&p); err != nil {
		if errors.Is(err, io.EOF) {
			return p, nil
		}
		var ute *json.UnmarshalTypeError
		if errors.As(err, &ute) {
			return p, &ValidationError{[]Problem{{Field: ute.Field, Message: fmt.Sprintf("expected %s, got a JSON %s", JSONKind(ute.Type), ute.Value)}}}
		}
		msg := err.Error()
		if f, ok := strings.CutPrefix(msg, "json: unknown field "); ok {
			f = strings.Trim(f, `"`)
			return p, &ValidationError{[]Problem{{Field: f, Message: "unknown parameter; known ones are " + strings.Join(paramNames(), ", ")}}}
		}
		return p, fmt.Errorf("parameters are not valid JSON: %w", err)
	}
	if dec.More() {
		return p, errors.New("parameters: trailing data after the JSON object")
	}
	return p, nil
}

// ParseJSONBytes is ParseJSON on a byte slice.
func ParseJSONBytes(b []byte) (Params, error) {
	if len(bytes.TrimSpace(b)) == 0 {
		return Defaults(), nil
	}
	return ParseJSON(bytes.NewReader(b))
}

func paramNames() []string {
	b, _ := json.Marshal(Params{ROI: nil})
	var m map[string]any
	_ = json.Unmarshal(b, &m)
	names := []string{"roi", "seeds", "scale_points", "calibration", "calibration_name"}
	for k := range m {
		names = append(names, k)
	}
	sort.Strings(names)
	return names
}

// Validate checks the parameters for an image of w×h pixels (w, h ≤ 0 skips
// the checks against the image size) and returns a *ValidationError listing
// every problem, or nil.
func (p *Params) Validate(w, h int) error {
	var ps []Problem
	add := func(field, format string, args ...any) {
		ps = append(ps, Problem{Field: field, Message: fmt.Sprintf(format, args...)})
	}
	finite := func(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

	switch {
	case p.Subset < 7 || p.Subset > MaxSubset:
		add("subset", "is %d px; use an odd size from 7 to %d (at least 3 speckles across, iDICs Good Practices Guide 2018)", p.Subset, MaxSubset)
	case p.Subset%2 == 0:
		add("subset", "is %d px; it must be odd so the subset has a centre pixel, e.g. %d", p.Subset, p.Subset+1)
	case w > 0 && h > 0 && (p.Subset > w || p.Subset > h):
		add("subset", "is %d px but the image is %d×%d px; use a subset smaller than the image", p.Subset, w, h)
	}
	if p.Step < 1 || p.Step > 1000 {
		add("step", "is %d px; use 1 to 1000 (a common choice is a third to a half of the subset)", p.Step)
	}
	if p.Shape != "first" && p.Shape != "second" {
		add("shape", "is %q; use \"first\" (affine) or \"second\" (quadratic)", p.Shape)
	}
	if p.Interpolation != "cubic" && p.Interpolation != "quintic" {
		add("interpolation", "is %q; use \"cubic\" or \"quintic\" (B-splines)", p.Interpolation)
	}
	if !finite(p.Prefilter) || p.Prefilter < 0 || p.Prefilter > 3 {
		add("prefilter_sigma", "is %g px; use 0 (off) to 3 (a light prefilter is 0.5 to 1)", p.Prefilter)
	}
	if p.Search < 0 || p.Search > MaxSearch {
		add("search", "is %d px; use 0 to %d (the largest displacement expected at the seed, plus a margin)", p.Search, MaxSearch)
	}
	if !finite(p.MinZNCC) || p.MinZNCC < -1 || p.MinZNCC > 1 {
		add("min_zncc", "is %g; use a value in [-1, 1], typically 0.7 to 0.95", p.MinZNCC)
	}
	if p.MaxIter < 1 || p.MaxIter > MaxIterations {
		add("max_iterations", "is %d; use 1 to %d", p.MaxIter, MaxIterations)
	}
	if !finite(p.Tolerance) || p.Tolerance <= 0 || p.Tolerance > 1 {
		add("tolerance", "is %g px; use a positive value up to 1, typically 1e-4", p.Tolerance)
	}
	if p.Threads < 0 || p.Threads > MaxThreads {
		add("threads", "is %d; use 0 (all cores) to %d", p.Threads, MaxThreads)
	}
	if !finite(p.Noise) || p.Noise < 0 {
		add("noise_sigma", "is %g; use 0 (estimate from the images) or the known noise in grey levels", p.Noise)
	}
	switch {
	case p.StrainWindow < 3 || p.StrainWindow > MaxStrainWindow:
		add("strain_window", "is %d grid points; use an odd number from 3 to %d", p.StrainWindow, MaxStrainWindow)
	case p.StrainWindow%2 == 0:
		add("strain_window", "is %d; it must be odd so the window is centred on its point, e.g. %d", p.StrainWindow, p.StrainWindow+1)
	}
	if p.StrainFit != "plane" && p.StrainFit != "quadratic" {
		add("strain_fit", "is %q; use \"plane\" or \"quadratic\"", p.StrainFit)
	}
	if p.StrainFit == "quadratic" && p.StrainWindow < 5 && p.StrainWindow >= 3 {
		add("strain_window", "is %d; a quadratic fit needs a window of at least 5", p.StrainWindow)
	}
	if !finite(p.MMPerPx) || p.MMPerPx < 0 {
		add("mm_per_px", "is %g; use 0 (results in px) or a positive scale", p.MMPerPx)
	}
	if s := p.ScalePoints; s != nil {
		if p.MMPerPx > 0 {
			add("scale_points", "given together with mm_per_px; give one of them")
		}
		dx, dy := s.B[0]-s.A[0], s.B[1]-s.A[1]
		if !finite(s.Distance) || s.Distance <= 0 {
			add("scale_points.distance_mm", "is %g; use the positive distance in mm between the two points", s.Distance)
		}
		if math.Hypot(dx, dy) < 1 {
			add("scale_points", "the two points are less than 1 px apart; pick points far apart on the specimen")
		}
	}
	if c := p.Calibration; c != nil {
		if err := c.Validate(); err != nil {
			add("calibration", "%v", err)
		} else if w > 0 && h > 0 && (c.Image[0] != w || c.Image[1] != h) {
			add("calibration", "is for %d×%d px images but the images are %d×%d px; use the calibration of this camera at this image size, or calibrate at this size",
				c.Image[0], c.Image[1], w, h)
		}
		if p.MMPerPx > 0 || p.ScalePoints != nil {
			add("calibration", "given together with mm_per_px or scale_points; the calibration sets the units (mm with a specimen plane), so leave the scale out")
		}
	}
	if len(p.Seeds) > MaxSeeds {
		add("seeds", "has %d points; give at most %d", len(p.Seeds), MaxSeeds)
	}
	if w > 0 && h > 0 {
		half := p.Subset / 2
		for i, s := range p.Seeds {
			if s[0] < half || s[1] < half || s[0] >= w-half || s[1] >= h-half {
				add(fmt.Sprintf("seeds[%d]", i), "(%d, %d) is too close to the edge of the %d×%d image for a %d px subset; keep it at least %d px inside", s[0], s[1], w, h, p.Subset, half)
			}
		}
		if r := p.ROI; r != nil && r.Rect != nil {
			x0, y0, x1, y1 := r.Rect[0], r.Rect[1], r.Rect[2], r.Rect[3]
			switch {
			case x1 <= x0 || y1 <= y0:
				add("roi.rect", "[%d, %d, %d, %d] is empty; give x0 < x1 and y0 < y1", x0, y0, x1, y1)
			case x0 < 0 || y0 < 0 || x1 > w || y1 > h:
				add("roi.rect", "[%d, %d, %d, %d] reaches outside the %d×%d image; keep 0 ≤ x0 < x1 ≤ %d and 0 ≤ y0 < y1 ≤ %d", x0, y0, x1, y1, w, h, w, h)
			case x1-x0 < p.Subset || y1-y0 < p.Subset:
				add("roi.rect", "is %d×%d px, smaller than one %d px subset; enlarge it or use a smaller subset", x1-x0, y1-y0, p.Subset)
			}
		}
		if r := p.ROI; r != nil {
			for i, v := range r.Polygon {
				if !finite(v[0]) || !finite(v[1]) {
					add(fmt.Sprintf("roi.polygon[%d]", i), "is not a finite point")
				}
			}
			if len(r.Polygon) > 0 && len(r.Polygon) < 3 {
				add("roi.polygon", "has %d vertices; a polygon needs at least 3", len(r.Polygon))
			}
			for i, hole := range r.Holes {
				if len(hole) < 3 {
					add(fmt.Sprintf("roi.holes[%d]", i), "has %d vertices; a hole needs at least 3", len(hole))
				}
			}
		}
	}
	if len(ps) == 0 {
		return nil
	}
	return &ValidationError{Problems: ps}
}

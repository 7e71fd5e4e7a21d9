package calib

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
)

// Kind is the kind of a calibration target.
type Kind string

// Target kinds.
const (
	// Checkerboard: Cols×Rows squares; the features are the inner corners.
	Checkerboard Kind = "checkerboard"
	// Dots: a Cols×Rows grid of dark dots; the features are the dot centres.
	Dots Kind = "dots"
)

// TargetFormat is the format tag of a target geometry file.
const TargetFormat = "mottle-target/1"

// Target is the geometry of a printed calibration target, as written to and
// read from its JSON file. Plane coordinates are in mm with X along the
// columns and Y along the rows, Y downward as printed.
//
// Checkerboard: squares of side Pitch cover [0, Cols·Pitch]×[0, Rows·Pitch];
// square (i, j) is dark when i + j is even. The features are the inner
// corners (i·Pitch, j·Pitch), 1 ≤ i < Cols, 1 ≤ j < Rows. The orientation
// marker is three light discs of diameter MarkerDiameter at the centres of
// the dark squares Marker[0] (the origin of the mark), Marker[1] (two
// squares along +X) and Marker[2] (two squares along +Y), placed near the
// middle so that partial views still show it.
//
// Dots: dots of diameter Dot centred at (i·Pitch, j·Pitch), 0 ≤ i < Cols,
// 0 ≤ j < Rows. The marker is three larger dots (diameter MarkerDiameter)
// at Marker[0], Marker[1] (one along +X) and Marker[2] (one along +Y).
type Target struct {
	Format string `json:"format"`
	Kind   Kind   `json:"kind"`
	// Cols, Rows are squares (checkerboard) or dots along X and Y.
	Cols int `json:"cols"`
	Rows int `json:"rows"`
	// Pitch is the square side or dot spacing, mm.
	Pitch float64 `json:"pitch_mm"`
	// Dot is the dot diameter, mm (dots only).
	Dot float64 `json:"dot_diameter_mm,omitempty"`
	// MarkerDiameter is the diameter of the marker discs or dots, mm.
	MarkerDiameter float64 `json:"marker_diameter_mm"`
	// Marker lists the origin, +X and +Y elements of the orientation mark
	// (square or dot indices).
	Marker [3][2]int `json:"marker"`
	// Margin is the light border printed around the pattern, mm.
	Margin float64 `json:"margin_mm"`
	// Points lists the features, for readers of the file; Features
	// recomputes them, and Read checks that they agree.
	Points []Feature `json:"points"`
}

// Feature is one point of a target: its indices and plane position (mm).
type Feature struct {
	I int     `json:"i"`
	J int     `json:"j"`
	X float64 `json:"x_mm"`
	Y float64 `json:"y_mm"`
	// R is the radius in mm of a dot (0 for a corner).
	R float64 `json:"r_mm,omitempty"`
}

// NewTarget returns the target of the given kind with cols×rows squares or
// dots of pitch mm, with the marker placed near the middle, discs or dots
// of the default sizes (0.4 of the pitch for checkerboard marker discs;
// dots 0.5 and marker dots 0.7 of the pitch) and a margin of one pitch.
// It returns an error if the sizes cannot hold the marker.
func NewTarget(kind Kind, cols, rows int, pitch float64) (*Target, error) {
	t := &Target{Format: TargetFormat, Kind: kind, Cols: cols, Rows: rows, Pitch: pitch, Margin: pitch}
	switch kind {
	case Checkerboard:
		t.MarkerDiameter = 0.4 * pitch
		// The marker origin: the dark square nearest the middle whose
		// marker squares stay inner squares.
		a, b := (cols-3)/2, (rows-3)/2
		if (a+b)%2 != 0 {
			switch {
			case b+3 <= rows-2:
				b++
			case a+3 <= cols-2:
				a++
			case b > 1:
				b--
			default:
				a--
			}
		}
		t.Marker = [3][2]int{{a, b}, {a + 2, b}, {a, b + 2}}
	case Dots:
		t.Dot = 0.5 * pitch
		t.MarkerDiameter = 0.7 * pitch
		a, b := (cols-2)/2, (rows-2)/2
		t.Marker = [3][2]int{{a, b}, {a + 1, b}, {a, b + 1}}
	}
	if err := t.check(); err != nil {
		return nil, err
	}
	t.Points = t.Features()
	return t, nil
}

// check validates the geometry without the point list.
func (t *Target) check() error {
	var errs []error
	if t.Format != TargetFormat {
		errs = append(errs, fmt.Errorf("target format %q: want %q (a file written by mottle target)", t.Format, TargetFormat))
	}
	if !(t.Pitch > 0 && t.Pitch < 1e4) {
		errs = append(errs, fmt.Errorf("target pitch %g mm: use a positive size below 10 m", t.Pitch))
	}
	if !(t.Margin >= 0 && t.Margin < 1e4) {
		errs = append(errs, fmt.Errorf("target margin %g mm: use a size ≥ 0", t.Margin))
	}
	switch t.Kind {
	case Checkerboard:
		if t.Cols < 5 || t.Rows < 5 || t.Cols > 200 || t.Rows > 200 {
			errs = append(errs, fmt.Errorf("checkerboard %d×%d squares: use 5–200 squares each way (the marker needs 5)", t.Cols, t.Rows))
		}
		if !(t.MarkerDiameter > 0 && t.MarkerDiameter <= 0.6*t.Pitch) {
			errs = append(errs, fmt.Errorf("checkerboard marker diameter %g mm: use (0, 0.6·pitch]", t.MarkerDiameter))
		}
		for k, m := range t.Marker {
			if m[0] < 1 || m[1] < 1 || m[0] > t.Cols-2 || m[1] > t.Rows-2 || (m[0]+m[1])%2 != 0 {
				errs = append(errs, fmt.Errorf("checkerboard marker %d at square %v: use a dark inner square (i + j even, 1 ≤ i ≤ cols−2, 1 ≤ j ≤ rows−2)", k, m))
			}
		}
	case Dots:
		if t.Cols < 4 || t.Rows < 4 || t.Cols > 300 || t.Rows > 300 {
			errs = append(errs, fmt.Errorf("dot grid %d×%d dots: use 4–300 dots each way", t.Cols, t.Rows))
		}
		if !(t.Dot > 0 && t.Dot < t.MarkerDiameter && t.MarkerDiameter < 0.9*t.Pitch) {
			errs = append(errs, fmt.Errorf("dot diameters %g and %g mm with pitch %g mm: use dot < marker dot < 0.9·pitch", t.Dot, t.MarkerDiameter, t.Pitch))
		}
		for k, m := range t.Marker {
			if m[0] < 0 || m[1] < 0 || m[0] >= t.Cols || m[1] >= t.Rows {
				errs = append(errs, fmt.Errorf("dot grid marker %d at dot %v: outside the %d×%d grid", k, m, t.Cols, t.Rows))
			}
		}
	default:
		errs = append(errs, fmt.Errorf("target kind %q: use %q or %q", t.Kind, Checkerboard, Dots))
	}
	if len(errs) == 0 {
		arm := t.arm()
		m := t.Marker
		if m[1] != [2]int{m[0][0] + arm, m[0][1]} || m[2] != [2]int{m[0][0], m[0][1] + arm} {
			errs = append(errs, fmt.Errorf("target marker %v: the second element must be %d along +X and the third %d along +Y of the first", m, arm, arm))
		}
	}
	return errors.Join(errs...)
}

// arm is the distance in squares or dots from the marker origin to its
// other two elements.
func (t *Target) arm() int {
	if t.Kind == Checkerboard {
		return 2
	}
	return 1
}

// Features returns the target's feature points in row-major order (j, then i).
func (t *Target) Features() []Feature {
	var f []Feature
	switch t.Kind {
	case Checkerboard:
		for j := 1; j < t.Rows; j++ {
			for i := 1; i < t.Cols; i++ {
				f = append(f, Feature{I: i, J: j, X: float64(i) * t.Pitch, Y: float64(j) * t.Pitch})
			}
		}
	case Dots:
		for j := 0; j < t.Rows; j++ {
			for i := 0; i < t.Cols; i++ {
				r := t.Dot / 2
				if t.isMarker(i, j) {
					r = t.MarkerDiameter / 2
				}
				f = append(f, Feature{I: i, J: j, X: float64(i) * t.Pitch, Y: float64(j) * t.Pitch, R: r})
			}
		}
	}
	return f
}

func (t *Target) isMarker(i, j int) bool {
	for _, m := range t.Marker {
		if m == [2]int{i, j} {
			return true
		}
	}
	return false
}

// feature returns the feature with indices (i, j) and whether it exists.
func (t *Target) feature(i, j int) (Feature, bool) {
	switch t.Kind {
	case Checkerboard:
		if i < 1 || j < 1 || i >= t.Cols || j >= t.Rows {
			return Feature{}, false
		}
		return Feature{I: i, J: j, X: float64(i) * t.Pitch, Y: float64(j) * t.Pitch}, true
	case Dots:
		if i < 0 || j < 0 || i >= t.Cols || j >= t.Rows {
			return Feature{}, false
		}
		r := t.Dot / 2
		if t.isMarker(i, j) {
			r = t.MarkerDiameter / 2
		}
		return Feature{I: i, J: j, X: float64(i) * t.Pitch, Y: float64(j) * t.Pitch, R: r}, true
	}
	return Feature{}, false
}

// Size returns the printed size in mm, margins included.
func (t *Target) Size() (w, h float64) {
	switch t.Kind {
	case Dots:
		return float64(t.Cols-1)*t.Pitch + t.MarkerDiameter + 2*t.Margin, float64(t.Rows-1)*t.Pitch + t.MarkerDiameter + 2*t.Margin
	}
	return float64(t.Cols)*t.Pitch + 2*t.Margin, float64(t.Rows)*t.Pitch + 2*t.Margin
}

// Origin returns the sheet position (mm from the top-left corner of the
// printed sheet) of the plane origin.
func (t *Target) Origin() (x, y float64) {
	if t.Kind == Dots {
		return t.Margin + t.MarkerDiameter/2, t.Margin + t.MarkerDiameter/2
	}
	return t.Margin, t.Margin
}

// Write encodes t as indented JSON.
func (t *Target) Write(w io.Writer) error {
	t.Points = t.Features()
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(t)
}

// ReadTarget decodes and checks a target geometry file. The error names
// the file and every problem found.
func ReadTarget(path string) (*Target, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("target file: %w", err)
	}
	t, err := ParseTarget(b)
	if err != nil {
		return nil, fmt.Errorf("target file %s: %w", path, err)
	}
	return t, nil
}

// ParseTarget decodes and checks target geometry JSON.
func ParseTarget(b []byte) (*Target, error) {
	var t Target
	if err := json.Unmarshal(b, &t); err != nil {
		return nil, fmt.Errorf("not a target geometry (JSON written by mottle target): %w", err)
	}
	if err := t.check(); err != nil {
		return nil, err
	}
	if t.Points != nil {
		want := t.Features()
		if len(want) != len(t.Points) {
			return nil, fmt.Errorf("target lists %d points but its geometry has %d: rewrite it with mottle target", len(t.Points), len(want))
		}
		for k, p := range t.Points {
			q := want[k]
			if p.I != q.I || p.J != q.J || math.Abs(p.X-q.X) > 1e-6 || math.Abs(p.Y-q.Y) > 1e-6 {
				return nil, fmt.Errorf("target point %d (%d, %d) at (%g, %g) mm does not match its geometry (%g, %g) mm: rewrite it with mottle target", k, p.I, p.J, p.X, p.Y, q.X, q.Y)
			}
		}
	}
	t.Points = t.Features()
	return &t, nil
}

package results

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strings"

	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/maps"
)

// MapRequest asks for one PNG map of a quantity of a field.
type MapRequest struct {
	// Quantity is the name of the quantity, e.g. "E11".
	Quantity string
	// OnDeformed draws the map over the deformed image, each point at its
	// deformed position x = X + u; otherwise over the reference image.
	OnDeformed bool
	// Range is the colour-bar range; [0, 0] means automatic.
	Range [2]float64
	// Opacity of the colours, (0, 1]; 0 means opaque.
	Opacity float64
	// MaxWidth limits the picture width in px; 0 means no limit.
	MaxWidth int
	// Title replaces the default title (the quantity and its description).
	Title string
	// Note replaces the default note (subset, step, VSG).
	Note string
	// Indexed draws an opaque map on a palette of 256 colours
	// (maps.Options.Indexed: the colour map in maps.IndexedSteps steps,
	// greys within 2 of 256 levels), which draws and encodes several times
	// faster than full colour; the maps of a results folder are drawn so.
	Indexed bool
}

// QuantityError is returned by RenderMap for a quantity the field lacks.
type QuantityError struct {
	Name string
	// Have lists the quantities the field has, sorted.
	Have []string
}

// Error names the quantity and the ones available.
func (e *QuantityError) Error() string {
	return fmt.Sprintf("quantity %q is not in the field; it has %s", e.Name, strings.Join(e.Have, ", "))
}

// RangeError is returned by RenderMap when the colour range cannot be
// used or found (e.g. no valid value to take it from).
type RangeError struct{ Err error }

// Error returns the reason.
func (e *RangeError) Error() string { return e.Err.Error() }

// Unwrap returns the underlying error.
func (e *RangeError) Unwrap() error { return e.Err }

// RenderMap draws quantity r.Quantity of f over bg (the reference image,
// or the deformed image with r.OnDeformed) and returns PNG bytes (maps.EncodePNG:
// the fastest compression level, the same bytes for the same map), on a
// palette of 256 colours when r.Indexed asks for it. An
// unknown quantity is a *QuantityError; a field without displacement for a
// map over the deformed image, or a map with no valid value, an error
// naming the cause.
func RenderMap(f *field.Field, bg *imageio.Gray, r MapRequest) ([]byte, error) {
	vals, ok := f.Get(r.Quantity)
	if !ok {
		names := f.Names()
		sort.Strings(names)
		return nil, &QuantityError{Name: r.Quantity, Have: names}
	}
	xs, ys := f.Grid.X, f.Grid.Y
	if r.OnDeformed {
		var err error
		if xs, ys, err = DeformedPositions(f); err != nil {
			return nil, err
		}
		// A point without a deformed position is drawn nowhere.
		v2 := append([]float64(nil), vals...)
		for k := range xs {
			if math.IsNaN(xs[k]) || math.IsNaN(ys[k]) {
				xs[k], ys[k], v2[k] = f.Grid.X[k], f.Grid.Y[k], math.NaN()
			}
		}
		vals = v2
	}
	note := r.Note
	if note == "" {
		note = fmt.Sprintf("subset %d px, step %d px", f.Grid.Subset, f.Grid.Step)
		if f.Meta.VSG > 0 {
			note += fmt.Sprintf(", VSG %.0f px", f.Meta.VSG)
		}
		if r.OnDeformed {
			note += ", over the deformed image"
		}
	}
	title := r.Title
	if title == "" {
		title = r.Quantity
		if d := field.Describe(r.Quantity); d != "" {
			title = r.Quantity + ": " + d
		}
	}
	m, err := maps.Render(maps.Layer{Nx: f.Grid.Nx, Ny: f.Grid.Ny, X: xs, Y: ys, Values: vals, Step: float64(f.Grid.Step)}, bg, maps.Options{
		Quantity: r.Quantity,
		Unit:     unitLabel(f.Units[r.Quantity]),
		Title:    title,
		Note:     note,
		Range:    r.Range,
		Opacity:  r.Opacity,
		MaxWidth: r.MaxWidth,
		ScaleBar: maps.ScaleBar{MMPerPx: f.Meta.MMPerPx},
		Indexed:  r.Indexed,
	})
	if err != nil {
		return nil, &RangeError{fmt.Errorf("map of %s: %w", r.Quantity, err)}
	}
	return maps.EncodePNG(m.Raster())
}

// RenderVectors draws the displacement vectors of f over the reference
// image bg and returns PNG bytes.
func RenderVectors(f *field.Field, bg *imageio.Gray, maxWidth int) ([]byte, error) {
	u, v, err := pixelDisplacements(f)
	if err != nil {
		return nil, err
	}
	m, err := maps.RenderVectors(maps.Vectors{Nx: f.Grid.Nx, Ny: f.Grid.Ny, X: f.Grid.X, Y: f.Grid.Y, U: u, V: v, Step: float64(f.Grid.Step)}, bg, maps.VectorOptions{
		ScaleBar: maps.ScaleBar{MMPerPx: f.Meta.MMPerPx},
		MaxWidth: maxWidth,
	})
	if err != nil {
		return nil, fmt.Errorf("vector plot: %w", err)
	}
	return maps.EncodePNG(m.Image)
}

func unitLabel(u string) string {
	if u == "1" {
		return ""
	}
	return u
}

// pixelDisplacements returns u and v of f in px, undoing the mm scale.
func pixelDisplacements(f *field.Field) (u, v []float64, err error) {
	if up, ok := f.Get("u_px"); ok {
		// A field made through a position mapping (a camera calibration)
		// keeps its image displacements in px beside the mapped u, v.
		if vp, ok := f.Get("v_px"); ok {
			return append([]float64(nil), up...), append([]float64(nil), vp...), nil
		}
	}
	uu, ok1 := f.Get("u")
	vv, ok2 := f.Get("v")
	if !ok1 || !ok2 {
		return nil, nil, errors.New("the field has no displacement (u, v)")
	}
	s := 1.0
	if f.Units["u"] == "mm" {
		if f.Meta.MMPerPx <= 0 {
			return nil, nil, errors.New("the field is in mm but has no mm_per_px scale")
		}
		s = 1 / f.Meta.MMPerPx
	}
	u, v = make([]float64, len(uu)), make([]float64, len(vv))
	for k := range uu {
		u[k], v[k] = uu[k]*s, vv[k]*s
	}
	return u, v, nil
}

// DeformedPositions returns the position x = X + u in the deformed image of
// every point of f, in px (NaN where the point is invalid). It returns an
// error for a field without displacement.
func DeformedPositions(f *field.Field) (xs, ys []float64, err error) {
	u, v, err := pixelDisplacements(f)
	if err != nil {
		return nil, nil, err
	}
	xs, ys = make([]float64, len(u)), make([]float64, len(v))
	for k := range u {
		xs[k], ys[k] = f.Grid.X[k]+u[k], f.Grid.Y[k]+v[k]
	}
	return xs, ys, nil
}

package results

import (
	"errors"
	"fmt"

	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/kinematics"
)

// SpatialView returns the spatial (Eulerian) view of f: every quantity placed
// at its point's deformed position x = X + u and resampled on a regular
// grid of the deformed image with the same step as f (linear interpolation
// over the deformed grid cells; see kinematics.ToDeformed). The result is a
// field whose grid coordinates are deformed-image pixels; Meta.Extra
// "configuration" is "spatial". Points of the deformed image that no
// measured material covers are NaN with status "no_material".
func SpatialView(f *field.Field, w, h int) (*field.Field, error) {
	if w < 1 || h < 1 {
		return nil, fmt.Errorf("spatial view: image size %d×%d", w, h)
	}
	u, v, err := pixelDisplacements(f)
	if err != nil {
		return nil, fmt.Errorf("spatial view: %w", err)
	}
	if f.Grid.Nx < 2 || f.Grid.Ny < 2 || f.Grid.Step < 1 {
		return nil, errors.New("spatial view: the field needs a grid of at least 2×2 points")
	}
	step := f.Grid.Step
	ref := kinematics.Grid{X0: f.Grid.X[0], Y0: f.Grid.Y[0], Step: float64(step), Nx: f.Grid.Nx, Ny: f.Grid.Ny}
	// The output grid covers the deformed image with the same step, aligned
	// with the reference grid's first point.
	x0, y0 := int(f.Grid.X[0])%step, int(f.Grid.Y[0])%step
	nx, ny := (w-1-x0)/step+1, (h-1-y0)/step+1
	out := kinematics.Grid{X0: float64(x0), Y0: float64(y0), Step: float64(step), Nx: nx, Ny: ny}
	names := f.Names()
	qs := make([][]float64, len(names))
	for i, n := range names {
		qs[i] = f.Quantities[n]
	}
	res, err := kinematics.ToDeformed(ref, u, v, qs, out)
	if err != nil {
		return nil, fmt.Errorf("spatial view: %w", err)
	}
	s := field.New(nx, ny, x0, y0, step, f.Grid.Subset)
	s.Params = f.Params
	s.Meta = f.Meta
	s.Meta.Extra = map[string]any{"configuration": "spatial", "from": "reference grid resampled at x = X + u"}
	for i, n := range names {
		if err := s.Set(n, f.Units[n], res[i]); err != nil {
			return nil, fmt.Errorf("spatial view: %w", err)
		}
	}
	if vals, ok := s.Get("u"); ok {
		for k, x := range vals {
			if x != x { // NaN
				s.Status[k] = "no_material"
			}
		}
	}
	return s, nil
}

package analysis

import (
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"

	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/maps"
)

// DefaultMaps are the quantities drawn over the reference image in a
// results folder.
var defaultMaps = []string{"u", "v", "E11", "E22", "E12", "e1", "e2", "rotation_deg", "von_mises", "zncc", "std_u"}

// DefaultMaps returns the quantities Write draws over the reference image;
// it also draws E11 and E22 over the deformed image and a vector plot.
func DefaultMaps() []string { return append([]string(nil), defaultMaps...) }

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
}

// RenderMap draws quantity q of f over bg (the reference image, or the
// deformed image with OnDeformed) and returns PNG bytes.
func RenderMap(f *field.Field, bg *imageio.Gray, r MapRequest) ([]byte, error) {
	vals, ok := f.Get(r.Quantity)
	if !ok {
		return nil, fmt.Errorf("quantity %q is not in the field; it has %s", r.Quantity, strings.Join(f.Names(), ", "))
	}
	xs, ys := f.Grid.X, f.Grid.Y
	if r.OnDeformed {
		var err error
		if xs, ys, err = DeformedPositions(f); err != nil {
			return nil, err
		}
	}
	note := fmt.Sprintf("subset %d px, step %d px", f.Grid.Subset, f.Grid.Step)
	if f.Meta.VSG > 0 {
		note += fmt.Sprintf(", VSG %.0f px", f.Meta.VSG)
	}
	if r.OnDeformed {
		note += ", over the deformed image"
	}
	title := r.Quantity
	if d := field.Describe(r.Quantity); d != "" {
		title = r.Quantity + ": " + d
	}
	// The label font has no superscripts.
	title = strings.NewReplacer("ᵀ", "^T", "⁻¹", "^-1", "⁻ᵀ", "^-T", "²", "^2").Replace(title)
	m, err := maps.Render(maps.Layer{Nx: f.Grid.Nx, Ny: f.Grid.Ny, X: xs, Y: ys, Values: vals, Step: float64(f.Grid.Step)}, bg, maps.Options{
		Quantity: r.Quantity,
		Unit:     unitLabel(f.Units[r.Quantity]),
		Title:    title,
		Note:     note,
		Range:    r.Range,
		Opacity:  r.Opacity,
		MaxWidth: r.MaxWidth,
		ScaleBar: maps.ScaleBar{MMPerPx: f.Meta.MMPerPx},
	})
	if err != nil {
		return nil, fmt.Errorf("map of %s: %w", r.Quantity, err)
	}
	return maps.EncodePNG(m.Image)
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
// every point of f, in px (NaN where the point is invalid).
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

// Write writes the results folder dir: the field in every format (see
// field.WriteDir), its spatial (Eulerian) view on a regular grid of the
// deformed image as spatial.npz and spatial.vts (see Spatial), the
// reference and deformed images as PNG, PNG maps of
// the DefaultMaps over the reference image, E11 and E22 over the deformed
// image, and a displacement vector plot under maps/. It returns the paths
// written. Maps of quantities the field lacks (or with no valid value) are
// skipped and reported in the returned error only if nothing at all could be
// drawn.
func Write(dir string, f *field.Field, ref, def *imageio.Gray) ([]string, error) {
	paths, err := field.WriteDir(dir, f)
	if err != nil {
		return paths, fmt.Errorf("results folder %s: %w", dir, err)
	}
	if ref == nil || def == nil {
		return paths, nil
	}
	if hasFinite(f, "u") && f.Grid.Nx > 1 && f.Grid.Ny > 1 {
		sp, err := Spatial(f, def.W, def.H)
		if err != nil {
			return paths, fmt.Errorf("results folder: %w", err)
		}
		for name, enc := range map[string]func(io.Writer, *field.Field) error{"spatial.npz": field.WriteNPZ, "spatial.vts": field.WriteVTS} {
			p := filepath.Join(dir, name)
			if err := field.WriteFileAtomic(p, 0o644, func(w io.Writer) error { return enc(w, sp) }); err != nil {
				return paths, fmt.Errorf("results folder: %w", err)
			}
			paths = append(paths, p)
		}
	}
	for name, g := range map[string]*imageio.Gray{"reference.png": ref, "deformed.png": def} {
		p := filepath.Join(dir, name)
		bits := 8
		if g.Bits > 8 {
			bits = 16
		}
		if err := field.WriteFileAtomic(p, 0o644, func(w io.Writer) error { return imageio.WritePNG(w, g, bits) }); err != nil {
			return paths, fmt.Errorf("results folder: %w", err)
		}
		paths = append(paths, p)
	}
	mdir := filepath.Join(dir, "maps")
	if err := os.MkdirAll(mdir, 0o755); err != nil {
		return paths, fmt.Errorf("results folder: %w", err)
	}
	var problems []error
	writePNG := func(name string, b []byte, err error) {
		if err != nil {
			problems = append(problems, err)
			return
		}
		p := filepath.Join(mdir, name)
		if err := field.WriteFileAtomic(p, 0o644, func(w io.Writer) error { _, e := w.Write(b); return e }); err != nil {
			problems = append(problems, err)
			return
		}
		paths = append(paths, p)
	}
	for _, q := range defaultMaps {
		if !hasFinite(f, q) {
			continue
		}
		b, err := RenderMap(f, ref, MapRequest{Quantity: q, MaxWidth: 1600})
		writePNG(q+".png", b, err)
	}
	for _, q := range []string{"E11", "E22"} {
		if !hasFinite(f, q) {
			continue
		}
		b, err := RenderMap(f, def, MapRequest{Quantity: q, OnDeformed: true, MaxWidth: 1600})
		writePNG(q+"_deformed.png", b, err)
	}
	if hasFinite(f, "u") {
		b, err := RenderVectors(f, ref, 1600)
		writePNG("vectors.png", b, err)
	}
	if len(problems) > 0 {
		return paths, fmt.Errorf("results folder maps: %w", errors.Join(problems...))
	}
	return paths, nil
}

func hasFinite(f *field.Field, q string) bool {
	vals, ok := f.Get(q)
	if !ok {
		return false
	}
	for _, x := range vals {
		if !math.IsNaN(x) && !math.IsInf(x, 0) {
			return true
		}
	}
	return false
}

package series

import (
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"time"

	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/kinematics"
	"github.com/mottledic/mottle/pkg/maps"
)

// unitOf returns the unit of a frame quantity for the series' length unit.
func unitOf(name, length string) string {
	switch {
	case name == "u" || name == "v" || name == "std_u" || name == "std_v":
		return length
	case strings.HasPrefix(name, "vel_"):
		return length + "/s"
	case strings.HasPrefix(name, "acc_"):
		return length + "/s^2"
	case strings.HasPrefix(name, "rate_"):
		return "1/s"
	case strings.HasSuffix(name, "_deg"):
		return "deg"
	}
	return "1"
}

// FrameField packs a frame's results into a field.Field (for its results
// folder or an HTTP response). ref names the reference image, meta the
// frame. It returns an error if the grid is not integer-aligned.
func FrameField(fr *Frame, p Params, ref string, meta FrameMeta, w, h int) (*field.Field, error) {
	p = p.withDefaults()
	g := fr.Grid
	if g.X0 != float64(int(g.X0)) || g.Y0 != float64(int(g.Y0)) || g.Step != float64(int(g.Step)) {
		return nil, fmt.Errorf("frame grid %+v is not on whole pixels", g)
	}
	f := field.New(g.Nx, g.Ny, int(g.X0), int(g.Y0), int(g.Step), p.Analysis.Subset)
	for name, v := range fr.Quantities {
		if err := f.Set(name, unitOf(name, p.Units), v); err != nil {
			return nil, err
		}
	}
	copy(f.Status, fr.Status)
	pj, err := json.Marshal(p)
	if err != nil {
		return nil, err
	}
	f.Params = pj
	f.Meta = field.Meta{
		Software:     "mottle series",
		Created:      time.Now().UTC(),
		Reference:    ref,
		Deformed:     meta.Name,
		ImageWidth:   w,
		ImageHeight:  h,
		VSG:          kinematics.VSG(p.Analysis.StrainWindow, g.Step, float64(p.Analysis.Subset)),
		StrainWindow: p.Analysis.StrainWindow,
		StrainFit:    p.Analysis.StrainFit,
		PrincipalOf:  "green_lagrange",
		Cautions:     field.Cautions(),
		Extra: map[string]any{
			"frame_index": fr.Summary.Index,
			"mode":        fr.Summary.Mode,
		},
	}
	if p.Units == "mm" {
		f.Meta.MMPerPx = p.lengthScale()
	}
	if meta.Time != nil {
		f.Meta.Extra["time_s"] = *meta.Time
	}
	if meta.Load != nil {
		f.Meta.Extra["load_N"] = *meta.Load
	}
	return f, nil
}

// WriteFrame writes a frame's results folder dir (field.json, CSV, VTS,
// NPY, see field.WriteDir) and, for each name in mapQuantities, a PNG map
// over img (the frame, with the field drawn at the deformed positions). It
// returns the paths written.
func WriteFrame(dir string, fr *Frame, p Params, ref string, meta FrameMeta, img *imageio.Gray, mapQuantities []string) ([]string, error) {
	f, err := FrameField(fr, p, ref, meta, img.W, img.H)
	if err != nil {
		return nil, fmt.Errorf("frame %d: %w", fr.Summary.Index, err)
	}
	paths, err := field.WriteDir(dir, f)
	if err != nil {
		return nil, err
	}
	for _, q := range mapQuantities {
		path := filepath.Join(dir, "map_"+q+".png")
		if err := writeMap(path, fr, p, img, q); err != nil {
			return paths, fmt.Errorf("frame %d map %s: %w", fr.Summary.Index, q, err)
		}
		paths = append(paths, path)
	}
	return paths, nil
}

// writeMap draws quantity q of fr over img, at the deformed positions.
func writeMap(path string, fr *Frame, p Params, img *imageio.Gray, q string) error {
	vals, ok := fr.Quantities[q]
	if !ok {
		return fmt.Errorf("no quantity %q", q)
	}
	p = p.withDefaults()
	g := fr.Grid
	n := g.Nx * g.Ny
	xs, ys := make([]float64, n), make([]float64, n)
	s := p.lengthScale()
	u, v := fr.Quantities["u"], fr.Quantities["v"]
	for k := range n {
		X := g.X0 + float64(k%g.Nx)*g.Step
		Y := g.Y0 + float64(k/g.Nx)*g.Step
		xs[k], ys[k] = X+u[k]/s, Y+v[k]/s
	}
	mm := 0.0
	if p.Units == "mm" {
		mm = s
	}
	title := fmt.Sprintf("%s, frame %d (%s)", q, fr.Summary.Index, fr.Summary.Mode)
	m, err := maps.Render(maps.Layer{Nx: g.Nx, Ny: g.Ny, X: xs, Y: ys, Values: vals, Step: g.Step}, img, maps.Options{
		Quantity: q, Unit: unitOf(q, p.Units), Title: title, ScaleBar: maps.ScaleBar{MMPerPx: mm}, MaxWidth: 900,
		Note: "measurement uncertainty applies; see the noise floor in the report",
	})
	if err != nil {
		return err
	}
	return field.WriteFileAtomic(path, 0o644, func(w io.Writer) error { return maps.WritePNG(w, m.Image) })
}

// WriteCurve writes curve.csv and curve.json into dir and returns their
// paths.
func WriteCurve(dir string, c Curve) ([]string, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, err
	}
	csvPath := filepath.Join(dir, "curve.csv")
	if err := field.WriteFileAtomic(csvPath, 0o644, c.WriteCSV); err != nil {
		return nil, err
	}
	jsonPath := filepath.Join(dir, "curve.json")
	err := field.WriteFileAtomic(jsonPath, 0o644, func(w io.Writer) error {
		e := json.NewEncoder(w)
		e.SetIndent("", "  ")
		return e.Encode(struct {
			Curve
			Properties Properties `json:"properties"`
			Cautions   []string   `json:"cautions"`
		}{c, c.Properties(), Cautions()})
	})
	if err != nil {
		return nil, err
	}
	return []string{csvPath, jsonPath}, nil
}

// Cautions are shown with every series result.
func Cautions() []string {
	return []string{
		"Every value here comes from an optical measurement with its own uncertainty; the noise floor reported with them is a lower bound on it, not the whole of it.",
		"Confirm strains and properties used for acceptance, design or safety with a calibrated extensometer of a suitable class (ASTM E83, ISO 9513) and a standard test (ASTM E8/E8M, ISO 6892-1, ASTM E111, ASTM E132, ISO 10113).",
		"Decisions on safety and design belong to the applicable local codes and a licensed engineer.",
	}
}

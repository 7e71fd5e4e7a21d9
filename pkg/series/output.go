package series

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"

	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
)

// unitOf returns the unit of a frame quantity for the series' length unit.
func unitOf(name, length string) string {
	switch {
	case name == "u" || name == "v" || name == "std_u" || name == "std_v":
		return length
	case strings.HasPrefix(name, "vel_"):
		return length + "/s"
	case strings.HasPrefix(name, "acc_"):
		return length + "/s²"
	case strings.HasPrefix(name, "rate_"):
		return "1/s"
	case strings.HasSuffix(name, "_deg"):
		return "deg"
	}
	return "1"
}

// FrameField returns a frame's result field (built by results.Build)
// with the frame's metadata: ref names the reference image, meta the
// frame, w×h is the image size. It returns an error for a frame without a
// field.
func FrameField(fr *Frame, p Params, ref string, meta FrameMeta, w, h int) (*field.Field, error) {
	if fr == nil || fr.Field == nil {
		return nil, fmt.Errorf("frame has no result field")
	}
	f := *fr.Field
	f.Meta.Extra = map[string]any{"frame_index": fr.Summary.Index, "mode": fr.Summary.Mode}
	for k, v := range fr.Field.Meta.Extra {
		f.Meta.Extra[k] = v
	}
	f.Meta.Reference, f.Meta.Deformed = ref, meta.Name
	f.Meta.ImageWidth, f.Meta.ImageHeight = w, h
	if meta.Time != nil {
		f.Meta.Extra["time_s"] = *meta.Time
	}
	if !meta.Orientation.Upright() {
		f.Meta.Extra["orientation"] = meta.Orientation.Meta()
	}
	if meta.Load != nil {
		f.Meta.Extra["load_N"] = *meta.Load
	}
	return &f, nil
}

// FrameFormats are the result formats of a frame's folder in a series by
// default: the stored result only, so a long series stays small; any
// other format is exported from it later (mottle export).
const FrameFormats = results.NPZ

// WriteFrame writes a frame's results folder dir with every data format
// (field.npz, field.json, CSV, VTS, NPY) and, for each name in
// mapQuantities, a PNG map map_<name>.png over img (the frame, with the
// field drawn at the deformed positions). It returns the paths written.
func WriteFrame(dir string, fr *Frame, p Params, ref string, meta FrameMeta, img *imageio.Gray, mapQuantities []string) ([]string, error) {
	set, err := results.ParseFormats("npz,json,csv,vts,npy")
	if err != nil {
		return nil, err
	}
	return WriteFrameFormats(context.Background(), dir, fr, p, ref, meta, img, set, mapQuantities)
}

// WriteFrameFormats is WriteFrame with the formats chosen by set (see
// results.Formats).
func WriteFrameFormats(ctx context.Context, dir string, fr *Frame, p Params, ref string, meta FrameMeta, img *imageio.Gray, set results.Set, mapQuantities []string) ([]string, error) {
	f, err := FrameField(fr, p, ref, meta, img.W, img.H)
	if err != nil {
		return nil, fmt.Errorf("frame %d: %w", fr.Summary.Index, err)
	}
	paths, err := results.Write(ctx, dir, f, results.Sources{Def: img}, set)
	if err != nil {
		return paths, err
	}
	for _, q := range mapQuantities {
		path := filepath.Join(dir, "map_"+q+".png")
		if err := writeMap(path, f, img, q); err != nil {
			return paths, fmt.Errorf("frame %d map %s: %w", fr.Summary.Index, q, err)
		}
		paths = append(paths, path)
	}
	return paths, nil
}

// writeMap draws quantity q of the frame field f over img, at the deformed
// positions, with the one map renderer, indexed as a results folder's maps.
func writeMap(path string, f *field.Field, img *imageio.Gray, q string) error {
	title := fmt.Sprintf("%s, frame %v (%v)", q, f.Meta.Extra["frame_index"], f.Meta.Extra["mode"])
	b, err := results.RenderMap(f, img, results.MapRequest{Quantity: q, OnDeformed: true, MaxWidth: 900, Title: title,
		Note: "measurement uncertainty applies; see the noise floor in the report", Indexed: true})
	if err != nil {
		return err
	}
	return field.WriteFileAtomic(path, 0o644, func(w io.Writer) error { _, err := w.Write(b); return err })
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

package analysis

import (
	"context"

	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
)

// Write writes the results folder dir with every format of the table of
// result files (results.Formats): the stored result, field.json, CSV, VTS,
// NPY, the spatial view, the images and every map. It is results.Write
// with all formats; callers that choose formats call results.Write.
func Write(dir string, f *field.Field, ref, def *imageio.Gray) ([]string, error) {
	all, _ := results.ParseFormats("all")
	return results.Write(context.Background(), dir, f, results.Sources{Ref: ref, Def: def}, all)
}

// Spatial returns the spatial (Eulerian) view of f on a regular grid of a
// w×h deformed image; see results.SpatialView.
func Spatial(f *field.Field, w, h int) (*field.Field, error) { return results.SpatialView(f, w, h) }

package main

import (
	"context"
	"fmt"
	"os"
	"path/filepath"

	"github.com/mottledic/mottle/pkg/results"
)

func runMap(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "map", "DIR --quantity NAME [flags]",
		"Re-render a PNG map of any quantity from a results folder written by analyze, demo or series.\n"+
			"The background is DIR/reference.png (or DIR/deformed.png with --on deformed), or else the\n"+
			"image file the analysis read.")
	q := fs.String("quantity", "E11", "quantity to draw (any name in field.json, e.g. u, v, E11, H22, E_max, rotation_deg, zncc)")
	on := fs.String("on", "reference", "background: reference (points at X) or deformed (points at x = X + u)")
	rng := fs.String("range", "", "colour-bar range `lo,hi` (default: 1st–99th percentile, symmetric for signed strain)")
	opacity := fs.Float64("opacity", 1, "opacity of the colours over the image, (0, 1]")
	out := fs.String("out", "", "output PNG `file` (default DIR/maps/QUANTITY[_deformed].png)")
	vectors := fs.Bool("vectors", false, "draw a displacement vector plot instead of a map")
	// Flags may come before or after the folder.
	pos, err := parseArgs(e, fs, args)
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		if len(pos) == 0 {
			fmt.Fprintln(e.stderr, "mottle map: give the results folder")
		} else {
			fmt.Fprintf(e.stderr, "mottle map: one results folder at a time; got %q\n", pos)
		}
		fs.Usage()
		return errUsage
	}
	dir := pos[0]
	req := results.MapRequest{Quantity: *q, Opacity: *opacity}
	switch *on {
	case "reference":
	case "deformed":
		req.OnDeformed = true
	default:
		return usagef("--on %q: use reference or deformed", *on)
	}
	if *rng != "" {
		v, err := floats(*rng, 2)
		if err != nil {
			return usagef("--range: %w (lo,hi, e.g. -0.002,0.002)", err)
		}
		if !(v[0] < v[1]) {
			return usagef("--range %s: lo must be below hi, e.g. -0.002,0.002", *rng)
		}
		req.Range = [2]float64{v[0], v[1]}
	}
	f, err := results.ReadStored(dir)
	if err != nil {
		return err
	}
	bg, err := background(dir, f, req.OnDeformed)
	if err != nil {
		return err
	}
	var png []byte
	name := *q
	if *vectors {
		png, err = results.RenderVectors(f, bg, 0)
		name = "vectors"
	} else {
		png, err = results.RenderMap(f, bg, req)
		if req.OnDeformed {
			name += "_deformed"
		}
	}
	if err != nil {
		return err
	}
	path := *out
	if path == "" {
		path = filepath.Join(dir, "maps", name+".png")
		if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
			return err
		}
	}
	if err := os.WriteFile(path, png, 0o644); err != nil {
		return fmt.Errorf("--out: %w", err)
	}
	fmt.Fprintf(e.stdout, "wrote %s\n", path)
	return nil
}

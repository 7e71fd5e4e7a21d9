package main

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/imageio"
)

const targetDescription = `Write a printable camera-calibration target and its geometry.

Two kinds, both general practice: a checkerboard (the features are the
inner corners) and a dot grid (the features are the dot centres). Mottle's
orientation marker tells the target's origin and axes even when only part
of it is seen: on a checkerboard three light discs in dark squares near the
middle, forming an L (origin, two squares along +X, two along +Y); on a dot
grid three larger dots forming an L (origin, one along +X, one along +Y).

Writes PREFIX.png (with its print resolution), PREFIX.svg (vector, in mm)
and PREFIX.json (the geometry "mottle calibrate --target" reads). Print at
100 % scale (no "fit to page"), measure the printed pitch with a ruler, and
correct pitch_mm in the JSON if it differs. Mount it flat on a rigid plate.

Examples:
  mottle target --kind checkerboard --cols 11 --rows 8 --pitch 15 --out board
  mottle target --kind dots --cols 12 --rows 9 --pitch 10 --dpi 600 --out dots`

func runTarget(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "target", "[flags]", targetDescription)
	kind := fs.String("kind", "checkerboard", "target kind: checkerboard or dots")
	cols := fs.Int("cols", 9, "squares (checkerboard) or dots along X")
	rows := fs.Int("rows", 7, "squares (checkerboard) or dots along Y")
	pitch := fs.Float64("pitch", 20, "square side or dot spacing in `mm`")
	margin := fs.Float64("margin", -1, "white border around the pattern in `mm` (default one pitch)")
	dpi := fs.Float64("dpi", 300, "print resolution of the PNG in dots per inch")
	out := fs.String("out", "target", "output `prefix`: writes PREFIX.png, PREFIX.svg and PREFIX.json")
	if err := noArgs(e, fs, "target", args); err != nil {
		return err
	}
	k := calib.Kind(strings.ToLower(*kind))
	t, err := calib.NewTarget(k, *cols, *rows, *pitch)
	if err != nil {
		return usageError{err}
	}
	if *margin >= 0 {
		t.Margin = *margin
	}
	img, err := t.Raster(*dpi)
	if err != nil {
		return usageError{err}
	}
	if dir := filepath.Dir(*out); dir != "." {
		if err := os.MkdirAll(dir, 0o755); err != nil {
			return err
		}
	}
	var png, svg, js bytes.Buffer
	if err := imageio.WritePNGDPI(&png, img, *dpi); err != nil {
		return err
	}
	if err := t.SVG(&svg); err != nil {
		return err
	}
	if err := t.Write(&js); err != nil {
		return err
	}
	var errs []error
	for ext, b := range map[string]*bytes.Buffer{".png": &png, ".svg": &svg, ".json": &js} {
		if err := os.WriteFile(*out+ext, b.Bytes(), 0o644); err != nil {
			errs = append(errs, err)
		}
	}
	if err := errors.Join(errs...); err != nil {
		return err
	}
	w, h := t.Size()
	fmt.Fprintf(e.stdout, "%s: %.1f × %.1f mm sheet, %d target points\nwrote %s.png (%d×%d px at %g dpi), %s.svg, %s.json\n",
		t.Caption(), w, h, len(t.Points), *out, img.Rect.Dx(), img.Rect.Dy(), *dpi, *out, *out)
	return ctx.Err()
}

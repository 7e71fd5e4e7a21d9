package main

import (
	"bytes"
	"context"
	"fmt"
	"image"
	"math"
	"os"
	"path/filepath"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

const patternDescription = `Write a printable random speckle pattern (black speckles on white).

The speckles are a Boolean model of discs (Sur, Blaysat & Grédiac 2018) of
the chosen diameter in mm, covering about half the surface. Choose the
speckle size for the camera: speckles of 3–5 camera pixels are good practice
(iDICs, "A Good Practices Guide for Digital Image Correlation", 2018), so a
0.3 mm speckle suits a field of view where one pixel is 0.06–0.1 mm
(give --camera-px to have this checked).

Writes OUT (a PNG carrying its print resolution). Print at 100 % scale.

Examples:
  mottle pattern --speckle 0.3 --width 100 --height 40 --dpi 600 --out coupon.png
  mottle pattern --speckle 1 --width 200 --height 200 --camera-px 0.25`

func runPattern(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "pattern", "[flags]", patternDescription)
	speckle := fs.Float64("speckle", 0.5, "mean speckle diameter in `mm`")
	width := fs.Float64("width", 100, "field width in `mm`")
	height := fs.Float64("height", 50, "field height in `mm`")
	dpi := fs.Float64("dpi", 600, "print resolution in dots per inch")
	coverage := fs.Float64("coverage", 0.5, "fraction of the surface covered by speckles, in (0, 1)")
	seed := fs.Int64("seed", 1, "pattern seed: the same seed gives the same pattern")
	cameraPx := fs.Float64("camera-px", 0, "size in `mm` of one camera pixel on the specimen, to check the speckle size (0 = no check)")
	out := fs.String("out", "pattern.png", "output PNG `file`")
	if err := noArgs(e, fs, "pattern", args); err != nil {
		return err
	}
	if !(*dpi >= 50 && *dpi <= 4800) {
		return usagef("--dpi %g: use 50–4800 dots per inch", *dpi)
	}
	if !(*width > 0 && *height > 0) {
		return usagef("--width %g, --height %g mm: use positive sizes", *width, *height)
	}
	dotsPerMM := *dpi / 25.4
	d := *speckle * dotsPerMM
	if !(d >= 2) {
		return usagef("--speckle %g mm is %.2f printer dots at %g dpi: use a speckle of at least 2 dots (%.3g mm) or a higher --dpi", *speckle, d, *dpi, 2/dotsPerMM)
	}
	w, h := int(math.Ceil(*width*dotsPerMM)), int(math.Ceil(*height*dotsPerMM))
	po := synth.PatternOptions{Diameter: d, Coverage: *coverage, Background: 1, Contrast: 1, EdgeBlur: -1, Seed: *seed,
		Bounds: synth.ImageRect(w, h, 0)}
	p, err := synth.NewPattern(po)
	if err != nil {
		return usageError{err}
	}
	g, _, err := synth.Render(p, nil, synth.RenderOptions{W: w, H: h, Supersample: 2, Midpoint: true})
	if err != nil {
		return usageError{err}
	}
	img := image.NewGray(image.Rect(0, 0, w, h))
	for y := range h {
		for x := range w {
			img.Pix[y*img.Stride+x] = uint8(g.Pix[y*g.Stride+x])
		}
	}
	var b bytes.Buffer
	if err := imageio.WritePNGDPI(&b, img, *dpi); err != nil {
		return err
	}
	if dir := filepath.Dir(*out); dir != "." {
		if err := os.MkdirAll(dir, 0o755); err != nil {
			return err
		}
	}
	if err := os.WriteFile(*out, b.Bytes(), 0o644); err != nil {
		return err
	}
	fmt.Fprintf(e.stdout, "wrote %s: %g × %g mm, %d speckles of %g mm, %d×%d px at %g dpi\n", *out, *width, *height, p.Count(), *speckle, w, h, *dpi)
	fmt.Fprintf(e.stdout, "good practice: %g mm speckles are 3–5 camera pixels when one pixel sees %.3g–%.3g mm\n", *speckle, *speckle/5, *speckle/3)
	if *cameraPx > 0 {
		n := *speckle / *cameraPx
		switch {
		case n < 3:
			fmt.Fprintf(e.stdout, "warning: at %g mm per camera pixel a speckle is %.1f px, under 3 px: choose --speckle ≥ %.3g mm\n", *cameraPx, n, 3**cameraPx)
		case n > 5:
			fmt.Fprintf(e.stdout, "note: at %g mm per camera pixel a speckle is %.1f px, over 5 px: smaller speckles (%.3g mm) give finer resolution\n", *cameraPx, n, 5**cameraPx)
		default:
			fmt.Fprintf(e.stdout, "at %g mm per camera pixel a speckle is %.1f px: within 3–5 px\n", *cameraPx, n)
		}
	}
	return ctx.Err()
}

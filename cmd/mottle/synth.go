package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

func synthDescription() string {
	var b strings.Builder
	b.WriteString(`Render exact synthetic speckle images and their true motion.

The pattern is a Boolean model of speckles (Sur, Blaysat & Grédiac 2018).
The deformed image is rendered from the analytic pattern at the reference
point of every sample (pixel integration by supersampling), never by
resampling a pixel image, so truth.json is exact. Writes to --out:
  reference.<ext>       the reference image
  deformed.<ext>        the deformed image (one pair), or
  frame_NNN.<ext>       the frames of a series (--frames or --static)
  truth.json            how the images were made, and the exact u, v and F
                        at the reference points of a grid (--grid-step)

Motions (--motion kind:name=value,...; parameters not given take the
default shown; positions are in px with pixel centres at integers):
`)
	for _, k := range synth.Kinds() {
		fmt.Fprintf(&b, "\n  %s: %s\n", k.Kind, k.Doc)
		for _, p := range k.Params {
			def := fmt.Sprint(p.Default)
			if p.ImageRel {
				def = "image-relative"
			}
			fmt.Fprintf(&b, "      %-11s %s [%s]\n", p.Name, p.Doc, def)
		}
	}
	b.WriteString(`
Examples:
  mottle synth --motion translation:u=2.5,v=-1.25 --noise 2
  mottle synth --motion affine:F11=1.3,F22=0.85 --size 384x384
  mottle synth --motion hole:stress_MPa=300,radius_px=40 --bits 16 --format tiff
  mottle synth --motion star --size 1000x300 --grid-step 4
  mottle synth --motion hole --frames 10 --full-load 12000   # loading series
  mottle synth --static 20 --noise 2                          # noise-floor series`)
	return b.String()
}

func runSynth(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "synth", "[flags]", synthDescription())
	out := fs.String("out", "synth-out", "output `directory` (created if missing)")
	size := fs.String("size", "512x512", "image size `WxH` in px")
	motion := fs.String("motion", "affine:F11=1.01,F22=0.997", "true motion `kind:name=value,...` (see above)")
	format := fs.String("format", "png", "image format: png or tiff")

	var po synth.PatternOptions
	fs.Float64Var(&po.Diameter, "diameter", 5, "mean speckle diameter in px (3–5 px is good practice)")
	fs.Float64Var(&po.Coverage, "coverage", 0.5, "fraction of the surface covered by speckles, in (0, 1)")
	fs.Float64Var(&po.SizeSpread, "spread", 0, "coefficient of variation of the speckle diameter (0 = equal speckles)")
	kind := fs.String("kind", "disc", "speckle shape: disc, gaussian or mixed")
	fs.Float64Var(&po.Background, "background", 0.8, "grey of the bare surface as a fraction of full scale")
	fs.Float64Var(&po.Contrast, "contrast", 0.6, "how much darker speckles are, as a fraction of full scale (negative = light speckles)")
	fs.Float64Var(&po.EdgeBlur, "edge-blur", 0.5, "half-width of the soft speckle edge in px (negative = hard edges)")
	fs.Int64Var(&po.Seed, "seed", 1, "pattern seed: the same seed gives the same pattern")

	var ro synth.RenderOptions
	fs.IntVar(&ro.Supersample, "supersample", 4, "samples per pixel side for pixel integration")
	fs.BoolVar(&ro.Midpoint, "midpoint", false, "integrate pixels with a regular sample grid instead of Gauss–Legendre nodes (bit-exact integer shifts, less accurate)")
	fs.Float64Var(&ro.Fill, "fill", 1, "pixel fill factor: light-sensitive fraction of the pixel side, in (0, 1]")
	fs.Float64Var(&ro.Blur, "blur", 0, "Gaussian lens blur σ in px (0 = none)")
	fs.Float64Var(&ro.Noise, "noise", 0, "Gaussian sensor noise σ in grey levels (0 = none)")
	fs.IntVar(&ro.Bits, "bits", 8, "bit depth: 8, 12 or 16 (12-bit levels 0–4095 are stored in 16-bit files)")
	fs.Float64Var(&ro.Gain, "gain", 0, "grey level of white (pattern value 1); 0 = 2^bits − 1")
	fs.Float64Var(&ro.Void, "void", 0, "grey fraction seen where there is no material (inside a hole)")
	fs.Int64Var(&ro.Seed, "noise-seed", 1, "noise seed of the reference; frame i uses noise-seed + 1 + i")

	gridStep := fs.Float64("grid-step", 16, "spacing in px of the reference points in truth.json (0 = none)")
	gridOffset := fs.Float64("grid-offset", 0, "position in px of the first grid point in x and y")
	frames := fs.Int("frames", 0, "render a loading series of this many frames after the reference, load factor rising linearly to 1 (0 = one deformed image)")
	static := fs.Int("static", 0, "render this many frames of the reference state with fresh noise (noise-floor series); ignores --motion")
	dt := fs.Float64("dt", 1, "time between frames in s")
	fullLoad := fs.Float64("full-load", 1, "load value recorded at load factor 1 (any unit, e.g. N)")
	if err := noArgs(e, fs, "synth", args); err != nil {
		return err
	}

	var errs []error
	var w, h int
	if _, err := fmt.Sscanf(strings.ToLower(*size), "%dx%d", &w, &h); err != nil || w <= 0 || h <= 0 {
		errs = append(errs, fmt.Errorf("--size %q: use WxH with positive integers, e.g. 512x384", *size))
	}
	ro.W, ro.H = w, h
	ext := ""
	switch strings.ToLower(*format) {
	case "png":
		ext = ".png"
	case "tiff", "tif":
		ext = ".tif"
	default:
		errs = append(errs, fmt.Errorf("--format %q: use png or tiff", *format))
	}
	k, err := synth.ParseKind(*kind)
	if err != nil {
		errs = append(errs, fmt.Errorf("--kind: %w", err))
	}
	po.Kind = k
	if po.EdgeBlur == 0 {
		po.EdgeBlur = -1 // an explicit 0 means hard edges, not the default
	}
	if *frames < 0 || *static < 0 || (*frames > 0 && *static > 0) {
		errs = append(errs, fmt.Errorf("--frames %d, --static %d: give at most one of them, non-negative", *frames, *static))
	}
	if *frames > 10000 || *static > 10000 {
		errs = append(errs, errors.New("--frames/--static: at most 10000 frames"))
	}
	if !(*gridStep >= 0) {
		errs = append(errs, fmt.Errorf("--grid-step %g: use a spacing ≥ 0 px", *gridStep))
	}
	var m synth.Motion
	if *static > 0 {
		m = synth.Identity{}
	} else if w > 0 && h > 0 {
		m, err = synth.ParseMotion(*motion, w, h)
		if err != nil {
			errs = append(errs, fmt.Errorf("--motion: %w", err))
		}
	}
	if err := ro.Validate(); err != nil {
		errs = append(errs, err)
	}
	if err := errors.Join(errs...); err != nil {
		fmt.Fprintf(e.stderr, "mottle synth: %v\n\nRun \"mottle synth --help\" for the flags.\n", err)
		return errUsage
	}

	var series []synth.Frame
	switch {
	case *static > 0:
		series = synth.StaticSeries(m, *static, *dt, 0)
	case *frames > 0:
		f := synth.Ramp(*frames)[1:]
		series, err = synth.LoadSeries(m, f, *dt, *fullLoad)
		if err != nil {
			return err
		}
		for i := range series {
			series[i].Index = i + 1
			series[i].Time = float64(i+1) * *dt
		}
	default:
		series = []synth.Frame{{Index: 1, Time: *dt, Factor: 1, Load: *fullLoad, Motion: m}}
	}

	if po.Bounds.Empty() {
		d := po.Diameter
		if d <= 0 {
			d = 5
		}
		po.Bounds = synth.BoundsForSeries(series, w, h, 2*d)
	}
	p, err := synth.NewPattern(po)
	if err != nil {
		return fmt.Errorf("pattern: %w", err)
	}
	if err := os.MkdirAll(*out, 0o755); err != nil {
		return err
	}
	fileBits := ro.Bits
	write := func(name string, g *imageio.Gray) error {
		return imageio.WriteFile(filepath.Join(*out, name), g, fileBits)
	}

	tf := synth.TruthFile{
		Generator: "mottle synth " + version,
		Width:     w, Height: h, Bits: ro.Bits,
		Reference: "reference" + ext,
		Pattern:   p.Options(),
		Speckles:  p.Count(),
		Render:    ro.WithDefaults(),
		Notes: []string{
			"Displacements in px, Lagrangian: u = x − X at the reference point (X, Y); pixel centres at integer coordinates.",
			"F[i][j] = ∂x_i/∂X_j; material = false marks reference points inside a hole.",
			"Images are exact renderings of an analytic pattern; grey levels are not rescaled (12-bit levels 0–4095 in 16-bit files).",
		},
	}
	grid := synth.GridSpec{}
	if *gridStep > 0 {
		grid = synth.ImageGrid(w, h, *gridStep, *gridOffset)
	}
	tf.Grid = grid

	ref, rep, err := synth.Render(p, synth.Reference(m), ro)
	if err != nil {
		return err
	}
	if rep.Failed > 0 {
		fmt.Fprintf(e.stderr, "warning: reference image: %d samples could not be rendered (pixels %v)\n", rep.Failed, rep.FailedPixels)
	}
	if err := write(tf.Reference, ref); err != nil {
		return err
	}
	single := *frames == 0 && *static == 0
	err = synth.RenderSeries(ctx, p, series, ro, func(f synth.Frame, g *imageio.Gray, r synth.Report) error {
		name := fmt.Sprintf("frame_%03d%s", f.Index, ext)
		if single {
			name = "deformed" + ext
		}
		if r.Failed > 0 {
			fmt.Fprintf(e.stderr, "warning: %s: κ⁻¹ failed for %d samples (first pixels %v); they show the void grey\n", name, r.Failed, r.FailedPixels)
		}
		if err := write(name, g); err != nil {
			return err
		}
		tf.Frames = append(tf.Frames, synth.TruthFrame{Frame: f, File: name, Spec: f.Motion.Spec(), Report: r,
			Points: synth.TruthPoints(f.Motion, grid)})
		if e.tty && !single {
			fmt.Fprintf(e.stderr, "\rframe %d/%d", len(tf.Frames), len(series))
		}
		return nil
	})
	if e.tty && !single {
		fmt.Fprintln(e.stderr)
	}
	if err != nil {
		return err
	}
	if err := synthWriteJSON(filepath.Join(*out, "truth.json"), tf); err != nil {
		return err
	}
	sz, _ := imageio.SpeckleSize(ref)
	fmt.Fprintf(e.stdout, "wrote %s: %s and %d deformed image(s), %d×%d px, %d-bit; %d speckles, measured speckle size %.2f px (2×autocorrelation HWHM); truth on %d×%d points\n",
		*out, tf.Reference, len(tf.Frames), w, h, ro.Bits, p.Count(), sz, grid.NX, grid.NY)
	return nil
}

// synthWriteJSON writes v as indented JSON to path via a temporary file.
func synthWriteJSON(path string, v any) error {
	b, err := json.MarshalIndent(v, "", " ")
	if err != nil {
		return fmt.Errorf("%s: %w", path, err)
	}
	tmp := path + ".tmp"
	if err := os.WriteFile(tmp, append(b, '\n'), 0o644); err != nil {
		return err
	}
	return os.Rename(tmp, path)
}

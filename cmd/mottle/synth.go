package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
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
  frame_NNN.<ext>       the frames of a series (--frames, --static or --test)
  load.csv              frame, time and load of a --test (for series --table)
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
  mottle synth --static 20 --noise 2                          # noise-floor series

A whole invented tensile test (--test tensile): an INVENTED coupon (demo
data, not a real material) loaded along x past yield, with a linear-elastic
then linear-hardening law (--modulus, --poisson, --yield, --hardening,
--r-value, --area). The gauge section, which fills the image, deforms
homogeneously: axial engineering strain e, width strain −νe while elastic;
beyond yield the true plastic strains keep the volume with
r = ε_width/ε_thickness (ISO 10113), after the elastic stretches 1 + σ/E
and 1 − νσ/E are taken out. --frames loading frames (default 19): half of
them evenly to the yield strain, the rest evenly to --max-strain. Besides
the images it writes load.csv (frame,time_s,load_N, as "mottle series
--table" reads it) and the true E, ν, Rp0.2, r and per-frame strains under
"tensile_test" in truth.json, and prints a "mottle series" command to try.
Unless set, --size is 384x256 and --bits 12 for this test.
  mottle synth --test tensile --out coupon`)
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
	frames := fs.Int("frames", 0, "render a loading series of this many frames after the reference, load factor rising linearly to 1 (0 = one deformed image; 19 with --test tensile)")
	static := fs.Int("static", 0, "render this many frames of the reference state with fresh noise (noise-floor series); ignores --motion")
	dt := fs.Float64("dt", 1, "time between frames in s")
	fullLoad := fs.Float64("full-load", 1, "load value recorded at load factor 1 (any unit, e.g. N)")
	test := fs.String("test", "", "render a whole invented test instead of --motion: tensile (see above)")
	law := synth.DemoTensileLaw()
	fs.Float64Var(&law.E, "modulus", law.E, "--test tensile: Young's modulus E in MPa (invented law)")
	fs.Float64Var(&law.Nu, "poisson", law.Nu, "--test tensile: Poisson's ratio ν")
	fs.Float64Var(&law.Yield, "yield", law.Yield, "--test tensile: yield stress σ_y in MPa where the linear range ends")
	fs.Float64Var(&law.Hardening, "hardening", law.Hardening, "--test tensile: hardening modulus H = dσ/de beyond yield in MPa (engineering stress and strain), below E")
	fs.Float64Var(&law.R, "r-value", law.R, "--test tensile: plastic strain ratio r = ε_width/ε_thickness (ISO 10113)")
	fs.Float64Var(&law.Area, "area", law.Area, "--test tensile: initial cross-section in mm² (load in N = stress in MPa × area)")
	maxStrain := fs.Float64("max-strain", 0.06, "--test tensile: axial engineering strain of the last frame (past the yield strain σ_y/E)")
	if err := noArgs(e, fs, "synth", args); err != nil {
		return err
	}

	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	var errs []error
	tensile := false
	switch strings.ToLower(*test) {
	case "":
		for _, n := range []string{"modulus", "poisson", "yield", "hardening", "r-value", "area", "max-strain"} {
			if set[n] {
				errs = append(errs, fmt.Errorf("--%s belongs to --test tensile; add --test tensile or leave it out", n))
			}
		}
	case "tensile":
		tensile = true
		if set["motion"] || set["static"] || set["full-load"] {
			errs = append(errs, errors.New("--test tensile makes its own motion and loads: leave out --motion, --static and --full-load"))
		}
		if !set["size"] {
			*size = "384x256"
		}
		if !set["bits"] {
			ro.Bits = 12
		}
		if !set["frames"] {
			*frames = 19
		}
		if err := law.Validate(); err != nil {
			errs = append(errs, err)
		}
	default:
		errs = append(errs, fmt.Errorf("--test %q: the one test is tensile", *test))
	}
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
	var strains []float64
	if tensile {
		m = synth.Identity{}
		if law.Validate() == nil {
			if strains, err = law.Schedule(*frames, *maxStrain); err != nil {
				errs = append(errs, fmt.Errorf("--frames, --max-strain: %w", err))
			}
		}
	} else if *static > 0 {
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
	case tensile:
		cx, cy := float64(w-1)/2, float64(h-1)/2
		for i, st := range strains {
			series = append(series, synth.Frame{Index: i + 1, Time: float64(i+1) * *dt, Factor: st / *maxStrain,
				Load: law.Stress(st) * law.Area, Motion: law.Motion(st, cx, cy)})
		}
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
	if tensile {
		states := []synth.TensileState{law.State(0)}
		states[0].File = tf.Reference
		for i, f := range tf.Frames {
			st := law.State(strains[i])
			st.Frame, st.File, st.Time = f.Index, f.File, f.Time
			states = append(states, st)
		}
		tt := law.Truth(states)
		tf.Tensile = &tt
		tf.Notes = append(tf.Notes,
			"tensile_test: an INVENTED coupon and material law (demo data, not a real material); the images show the middle of the gauge section, loaded along x.",
			"tensile_test: loads in load.csv are stress × initial area; strains are exact (the images are rendered from the motion, nothing is interpolated).")
		if err := writeLoadCSV(filepath.Join(*out, "load.csv"), states); err != nil {
			return err
		}
	}
	if err := synthWriteJSON(filepath.Join(*out, "truth.json"), tf); err != nil {
		return err
	}
	sz, _ := imageio.SpeckleSize(ref)
	fmt.Fprintf(e.stdout, "wrote %s: %s and %d deformed image(s), %d×%d px, %d-bit; %d speckles, measured speckle size %.2f px (2×autocorrelation HWHM); truth on %d×%d points\n",
		*out, tf.Reference, len(tf.Frames), w, h, ro.Bits, p.Count(), sz, grid.NX, grid.NY)
	if tensile {
		printTensile(e.stdout, *out, law, strains, w, h)
	}
	return nil
}

// writeLoadCSV writes the per-frame time and load of a tensile test in
// the format of "mottle series --table" (series.ReadTable).
func writeLoadCSV(path string, states []synth.TensileState) error {
	var b strings.Builder
	b.WriteString("# invented tensile test (demo data): load = stress × initial area\nframe,time_s,load_N\n")
	for _, s := range states {
		fmt.Fprintf(&b, "%d,%s,%s\n", s.Frame, strconv.FormatFloat(s.Time, 'g', -1, 64), strconv.FormatFloat(s.Load, 'g', 10, 64))
	}
	return os.WriteFile(path, []byte(b.String()), 0o644)
}

// tensileSeriesArgs returns the "mottle series" arguments that measure the
// properties of a rendered tensile test in folder dir: a gauge over the
// middle two thirds of the image, the modulus (and Poisson) range inside
// the linear part of the schedule, the r range from twice the yield
// strain (or mid-way to the end) to past the last frame.
func tensileSeriesArgs(dir string, law synth.TensileLaw, strains []float64, w, h int) []string {
	ey := law.YieldStrain()
	ne := 0
	for _, s := range strains {
		if s <= ey {
			ne++
		}
	}
	last := strains[len(strains)-1]
	lo, hi := ey/float64(2*ne), ey*(1-1/float64(2*ne))
	rlo := math.Min(2*ey, (ey+last)/2)
	rhi := last * 1.02
	g := func(v float64) string { return strconv.FormatFloat(v, 'g', 4, 64) }
	x0, x1 := w/6, w-w/6
	y0, y1 := h/6, h-h/6
	return []string{dir, "--table", filepath.Join(dir, "load.csv"), "--area", g(law.Area),
		"--gauge", fmt.Sprintf("mid:%d,%d,%d,%d", x0, y0, x1, y1), "--axial", "gauge:mid:E11", "--transverse", "gauge:mid:E22",
		"--modulus-range", g(lo) + "," + g(hi), "--r-range", g(rlo) + "," + g(rhi), "--out", dir + "-results"}
}

// printTensile prints the true properties of a rendered tensile test and
// the series command that measures them.
func printTensile(w io.Writer, dir string, law synth.TensileLaw, strains []float64, width, height int) {
	fmt.Fprintf(w, "INVENTED tensile coupon (demo data, not a real material): E = %g MPa, ν = %g, σ_y = %g MPa, H = %g MPa, r = %g, area %g mm²\n",
		law.E, law.Nu, law.Yield, law.Hardening, law.R, law.Area)
	fmt.Fprintf(w, "true properties: E = %g MPa, ν = %g, Rp0.2 = %.5g MPa, r = %g; %d frames to axial strain %g (yield strain %g); loads in %s\n",
		law.E, law.Nu, law.OffsetYield(0.002), law.R, len(strains), strains[len(strains)-1], law.YieldStrain(), filepath.Join(dir, "load.csv"))
	args := tensileSeriesArgs(dir, law, strains, width, height)
	fmt.Fprintf(w, "measure them with:\n  mottle series %s\n", strings.Join(args, " "))
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

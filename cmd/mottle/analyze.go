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
	"sort"
	"strconv"
	"strings"
	"time"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
	"github.com/mottledic/mottle/pkg/roi"
)

// paramFlags registers the analysis parameters on fs and returns a function
// that applies the flags the user set over p (a --params file first, then
// individual flags).
func paramFlags(fs *flag.FlagSet) func(p *analysis.Params) error {
	d := analysis.Defaults()
	file := fs.String("params", "", "JSON `file` of analysis parameters (the names of field.json's params); flags override it")
	subset := &subsetFlag{n: d.Subset}
	fs.Var(subset, "subset", "subset side in `px`, odd; at least 3 speckles across (iDICs Good Practices Guide 2018); "+
		"or auto: the smallest subset that meets --target-std")
	step := fs.Int("step", d.Step, "grid spacing in `px`; smaller costs time (points grow as 1/step²) and adds no independent data below subset/2")
	shape := fs.String("shape", d.Shape, "shape function: first (affine) or second (quadratic, for strain gradients)")
	interp := fs.String("interp", d.Interpolation, "interpolation: cubic or quintic B-spline")
	prefilter := fs.Float64("prefilter", d.Prefilter, "Gaussian prefilter σ in `px` (0 = off; 0.5–1 lowers interpolation bias)")
	roiFlag := fs.String("roi", "", roiHelp)
	var seeds seedList
	fs.Var(&seeds, "seed", "seed point `x,y` in px (repeatable); default: a well-textured point near the ROI centre")
	search := fs.Int("search", d.Search, "integer search radius in `px` around the seeds: the largest displacement at a seed")
	minZNCC := fs.Float64("min-zncc", d.MinZNCC, "reject points whose ZNCC is below this")
	maxIter := fs.Int("max-iter", d.MaxIter, "IC-GN iteration cap per point")
	tol := fs.Float64("tol", d.Tolerance, "IC-GN convergence tolerance in `px`")
	threads := fs.Int("threads", 0, "worker goroutines (0 = all cores); results do not depend on it")
	noise := fs.Float64("noise", 0, "known image noise σ in grey levels (0 = estimate from the residuals)")
	window := fs.Int("strain-window", d.StrainWindow, "strain window side in grid points, odd; VSG = (window−1)·step + subset")
	fit := fs.String("strain-fit", d.StrainFit, "local fit of the strain window: plane or quadratic")
	mmpp := fs.Float64("mm-per-px", 0, "image scale in mm per px (0 = results in px)")
	scalePts := fs.String("scale-points", "", "scale from two points and their distance: `x1,y1,x2,y2,mm`")
	calFile := fs.String("calibration", "", "camera calibration `file` from mottle calibrate: positions are undistorted before displacements and strains are formed, in mm in the specimen plane when the file has one (excludes --mm-per-px and --scale-points)")
	return func(p *analysis.Params) error {
		if *file != "" {
			b, err := os.ReadFile(*file)
			if err != nil {
				return fmt.Errorf("--params: %w", err)
			}
			q, err := analysis.ParseJSONBytes(b)
			if err != nil {
				return fmt.Errorf("--params %s: %w", *file, err)
			}
			*p = q
		}
		set := map[string]bool{}
		fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
		apply := map[string]func() error{
			"subset": func() error {
				if !subset.auto {
					p.Subset = subset.n
				}
				return nil
			},
			"step":          func() error { p.Step = *step; return nil },
			"shape":         func() error { p.Shape = *shape; return nil },
			"interp":        func() error { p.Interpolation = *interp; return nil },
			"prefilter":     func() error { p.Prefilter = *prefilter; return nil },
			"search":        func() error { p.Search = *search; return nil },
			"min-zncc":      func() error { p.MinZNCC = *minZNCC; return nil },
			"max-iter":      func() error { p.MaxIter = *maxIter; return nil },
			"tol":           func() error { p.Tolerance = *tol; return nil },
			"threads":       func() error { p.Threads = *threads; return nil },
			"noise":         func() error { p.Noise = *noise; return nil },
			"strain-window": func() error { p.StrainWindow = *window; return nil },
			"strain-fit":    func() error { p.StrainFit = *fit; return nil },
			"mm-per-px":     func() error { p.MMPerPx = *mmpp; return nil },
			"seed":          func() error { p.Seeds = seeds; return nil },
			"roi": func() error {
				s, err := parseROI(*roiFlag)
				p.ROI = s
				return err
			},
			"calibration": func() error {
				c, err := calib.ReadFile(*calFile)
				if err != nil {
					return fmt.Errorf("--calibration: %w", err)
				}
				p.Calibration, p.CalibrationName = c.Compact(), filepath.Base(*calFile)
				return nil
			},
			"scale-points": func() error {
				v, err := floats(*scalePts, 5)
				if err != nil {
					return usagef("--scale-points: %w; give x1,y1,x2,y2,mm, e.g. 100,200,900,200,40", err)
				}
				p.ScalePoints = &analysis.ScaleRef{A: [2]float64{v[0], v[1]}, B: [2]float64{v[2], v[3]}, Distance: v[4]}
				return nil
			},
		}
		for name, f := range apply {
			if set[name] {
				if err := f(); err != nil {
					return err
				}
			}
		}
		return nil
	}
}

type seedList [][2]int

func (s *seedList) String() string { return fmt.Sprint([][2]int(*s)) }
func (s *seedList) Set(v string) error {
	f, err := floats(v, 2)
	if err != nil {
		return err
	}
	for i, c := range f {
		if c != math.Trunc(c) {
			return fmt.Errorf("%q: %s = %v is not a whole pixel; a seed is the pixel (x, y) at a subset centre, e.g. 256,192", v, [2]string{"x", "y"}[i], c)
		}
	}
	*s = append(*s, [2]int{int(f[0]), int(f[1])})
	return nil
}

// floats parses n comma-separated numbers.
func floats(s string, n int) ([]float64, error) {
	parts := strings.Split(s, ",")
	if len(parts) != n {
		return nil, fmt.Errorf("%q: want %d comma-separated numbers", s, n)
	}
	out := make([]float64, n)
	for i, p := range parts {
		v, err := strconv.ParseFloat(strings.TrimSpace(p), 64)
		if err != nil {
			return nil, fmt.Errorf("%q: %q is not a number", s, p)
		}
		out[i] = v
	}
	return out, nil
}

func parseROI(s string) (*roi.Spec, error) {
	if name, ok := strings.CutPrefix(s, "@"); ok {
		b, err := os.ReadFile(name)
		if err != nil {
			return nil, fmt.Errorf("--roi: %w", err)
		}
		var spec roi.Spec
		dec := json.NewDecoder(strings.NewReader(string(b)))
		dec.DisallowUnknownFields()
		if err := dec.Decode(&spec); err != nil {
			return nil, fmt.Errorf("--roi %s: %w (want {\"rect\": [x0,y0,x1,y1], \"polygon\": [[x,y],…], \"holes\": [[[x,y],…]]})", name, err)
		}
		return &spec, nil
	}
	v, err := floats(s, 4)
	if err != nil {
		return nil, usagef("--roi: %w; give x0,y0,x1,y1 in px, e.g. 40,30,350,230, or @file.json", err)
	}
	var r [4]int
	for i, f := range v {
		if f != math.Trunc(f) || math.Abs(f) > 1<<30 {
			return nil, usagef("--roi %q: %s = %v is not a whole pixel; the rectangle holds the pixels x0 ≤ x < x1, y0 ≤ y < y1 on whole-pixel bounds (x1, y1 exclusive), e.g. 40,30,350,230", s, [4]string{"x0", "y0", "x1", "y1"}[i], f)
		}
		r[i] = int(f)
	}
	return &roi.Spec{Rect: &r}, nil
}

// roiHelp is the help text of --roi.
const roiHelp = "region of interest: x0,y0,x1,y1 in whole px, the pixels x0 ≤ x < x1, y0 ≤ y < y1 (x1, y1 exclusive), or @file.json with {\"rect\":…, \"polygon\":…, \"holes\":…}"

// limitHint adds to an image error that went over the pixel limit how to
// raise it with --max-pixels.
func limitHint(err error, limit int64) error {
	if errors.Is(err, imageio.ErrTooLarge) && strings.Contains(err.Error(), fmt.Sprintf("limit of %d px", limit)) {
		return fmt.Errorf("%w with --max-pixels N (at least the image's width × height)", err)
	}
	return err
}

// readPair decodes the reference and the deformed image files, both at
// once; an error names the image (the reference's first when both fail).
func readPair(ref, def string, lim imageio.Limits) (r, d *imageio.Gray, err error) {
	var derr error
	done := make(chan struct{})
	go func() {
		defer close(done)
		d, derr = imageio.ReadFile(def, lim)
	}()
	r, err = imageio.ReadFile(ref, lim)
	<-done
	if err != nil {
		return nil, nil, fmt.Errorf("reference image: %w", limitHint(err, lim.MaxPixels))
	}
	if derr != nil {
		return nil, nil, fmt.Errorf("deformed image: %w", limitHint(derr, lim.MaxPixels))
	}
	return r, d, nil
}

// checkWritable creates the folder dir if needed and makes sure a file can
// be written in it, so that a long run does not fail only at the end.
func checkWritable(dir string) error {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return fmt.Errorf("--out %s: cannot create the results folder (%w); choose a folder you may write to", dir, err)
	}
	f, err := os.CreateTemp(dir, ".mottle-write-check-*")
	if err != nil {
		return fmt.Errorf("--out %s: cannot write in the results folder (%w); choose a folder you may write to", dir, err)
	}
	name := f.Name()
	f.Close()
	return os.Remove(name)
}

func runAnalyze(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "analyze", "--ref REF --def DEF [flags]",
		"Correlate a reference and a deformed speckle image and write a results folder: by default\n"+
			"field.npz (the stored result: every quantity, float32) and PNG maps under maps/; --formats\n"+
			"asks for more, and \"mottle export DIR --formats …\" writes any format later from field.npz.\n"+
			"Displacements are referred to the reference image (Lagrangian). Prints a one-screen summary.\n\n"+
			formatsHelp())
	ref := fs.String("ref", "", "reference image `file` (PNG, TIFF, JPEG or BMP)")
	def := fs.String("def", "", "deformed image `file`")
	out := fs.String("out", "mottle-results", "results `folder`")
	maxPix := fs.Int64("max-pixels", imageio.DefaultLimits().MaxPixels, "refuse images with more pixels than this (width × height)")
	maskFile := fs.String("mask", "", "mask image `file`: pixels brighter than half the maximum are inside the ROI")
	formats := fs.String("formats", results.DefaultFormats, "result `formats` to write, comma-separated (see above; \"all\" for every one)")
	apply := paramFlags(fs)
	auto := autoFlags(fs)
	if err := noArgs(e, fs, "analyze", args); err != nil {
		return err
	}
	if *ref == "" || *def == "" {
		fmt.Fprintln(e.stderr, "mottle analyze: both --ref and --def are required")
		fs.Usage()
		return errUsage
	}
	p := analysis.Defaults()
	if err := apply(&p); err != nil {
		return err
	}
	set, err := results.ParseFormats(*formats)
	if err != nil {
		return usagef("--formats: %w", err)
	}
	lim := imageio.DefaultLimits()
	lim.MaxPixels = *maxPix
	r, d, err := readPair(*ref, *def, lim)
	if err != nil {
		return err
	}
	orient, err := orientPair(e.stdout, &r, &d, *def)
	if err != nil {
		return err
	}
	job := analysis.Job{Ref: r, Def: d, RefName: *ref, DefName: *def, Params: p}
	if *maskFile != "" {
		if job.Mask, err = imageio.ReadFile(*maskFile, lim); err != nil {
			return fmt.Errorf("mask image: %w", limitHint(err, lim.MaxPixels))
		}
	}
	if err := checkWritable(*out); err != nil {
		return err
	}
	if subsetAuto(fs) {
		if err := chooseSubset(ctx, e.stdout, &job, auto, lim, *out); err != nil {
			return err
		}
	}
	// RunJob assesses the image quality while it correlates (the checks
	// only read the images); the report is printed when both are done.
	pb := newBar(e, "correlating", "points")
	job.Progress = pb.update
	res, err := analysis.RunJob(ctx, job)
	pb.done()
	if err != nil {
		return err
	}
	printQuality(e.stdout, res.Quality)
	recordSources(res.Field, *ref, *def)
	if !orient.Upright() {
		res.Field.Meta.Extra["orientation"] = orient.Meta()
	}
	src, err := sources(set, r, d, *ref, *def)
	if err != nil {
		return err
	}
	if _, err := results.Write(ctx, *out, res.Field, src, set); err != nil {
		return err
	}
	printSummary(e.stdout, res.Field, res.Elapsed)
	fmt.Fprintf(e.stdout, "results: %s/ (%s; more with mottle export %s --formats …)\n", *out, set, *out)
	if res.Correlation.Stats.OK == 0 {
		return fmt.Errorf("no point could be matched (%d seed attempts failed): if the specimen moved more than --search %d px at the seed, raise --search, or give a --seed x,y on well-textured speckles; check that --ref and --def show the same specimen", len(res.Correlation.Seeds), p.Search)
	}
	return nil
}

// printSummary writes the one-screen summary of a result field.
func printSummary(w io.Writer, f *field.Field, elapsed time.Duration) {
	n := f.Grid.Len()
	counts := f.StatusCounts()
	valid := 0
	if vals, ok := f.Get("valid"); ok {
		for _, v := range vals {
			if v == 1 {
				valid++
			}
		}
	}
	fmt.Fprintf(w, "grid: %d×%d = %d points, subset %d px, step %d px; %d valid (%.1f %%)\n",
		f.Grid.Nx, f.Grid.Ny, n, f.Grid.Subset, f.Grid.Step, valid, 100*float64(valid)/float64(max(n, 1)))
	var keys []string
	for k := range counts {
		if k != "ok" {
			keys = append(keys, k)
		}
	}
	sort.Strings(keys)
	if len(keys) > 0 {
		parts := make([]string, len(keys))
		for i, k := range keys {
			parts[i] = fmt.Sprintf("%s %d", k, counts[k])
		}
		fmt.Fprintf(w, "not measured or no strain: %s\n", strings.Join(parts, ", "))
	}
	if c, ok := f.Meta.Extra["calibration"].(map[string]any); ok {
		fmt.Fprintf(w, "positions corrected with the calibration %v (reprojection RMS %.3g px); lengths in %v\n", c["name"], c["rms_px"], c["unit"])
	}
	fmt.Fprintf(w, "strain window %d points (%s fit), virtual strain gauge %.0f px", f.Meta.StrainWindow, f.Meta.StrainFit, f.Meta.VSG)
	if f.Meta.MMPerPx > 0 {
		fmt.Fprintf(w, " = %.3f mm", f.Meta.VSG*f.Meta.MMPerPx)
	}
	switch src := f.Meta.Extra["noise_source"]; src {
	case "residual":
		// The residual holds the image noise and whatever the subset's
		// shape function and the interpolation leave unmatched; on clean
		// images it is mostly the latter.
		fmt.Fprintf(w, "; residual σ %.2f grey levels (image noise plus unmatched pattern; give --noise if known)\n", f.Meta.NoiseSigma)
	default:
		fmt.Fprintf(w, "; image noise σ %.2f grey levels (%v)\n", f.Meta.NoiseSigma, src)
	}
	fmt.Fprintf(w, "  %-14s %12s %12s %12s %12s %10s\n", "quantity", "mean", "std", "min", "max", "unit")
	for _, q := range []string{"u", "v", "E11", "E22", "E12", "E_max", "E_min", "rotation_deg", "von_mises", "zncc", "std_u", "std_v", "std_E11"} {
		s, err := f.Summary(q)
		if err != nil || s.Count == 0 {
			continue
		}
		fmt.Fprintf(w, "  %-14s %12.4g %12.4g %12.4g %12.4g %10s\n", q, s.Mean, s.Std, s.Min, s.Max, f.Units[q])
	}
	if elapsed > 0 {
		fmt.Fprintf(w, "time %.2f s (%.0f points/s)\n", elapsed.Seconds(), float64(n)/elapsed.Seconds())
	}
	fmt.Fprintln(w, "caution: every value carries a measurement uncertainty (std_*); confirm critical strains with a")
	fmt.Fprintln(w, "calibrated extensometer (ASTM E83 / ISO 9513) and leave safety decisions to local codes and licensed engineers.")
}

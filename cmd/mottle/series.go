package main

import (
	"context"
	"encoding/csv"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strconv"
	"strings"
	"sync"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
	"github.com/mottledic/mottle/pkg/series"
)

// listFlag collects a repeatable string flag.
type listFlag []string

func (l *listFlag) String() string     { return strings.Join(*l, " ") }
func (l *listFlag) Set(s string) error { *l = append(*l, s); return nil }

// parseFloats parses n comma-separated numbers.
func parseFloats(s string, n int, what string) ([]float64, error) {
	parts := strings.Split(s, ",")
	if len(parts) != n {
		return nil, fmt.Errorf("%s %q: want %d comma-separated numbers", what, s, n)
	}
	out := make([]float64, n)
	for i, p := range parts {
		v, err := strconv.ParseFloat(strings.TrimSpace(p), 64)
		if err != nil {
			return nil, fmt.Errorf("%s %q: %q is not a number", what, s, p)
		}
		out[i] = v
	}
	return out, nil
}

func runSeries(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "series", "[flags] <folder | glob | frames...>",
		"Analyses a test series: every frame is correlated with the reference (the first frame\n"+
			"unless --ref is given), switching to incremental correlation when that degrades. Writes\n"+
			"a results folder per frame, curve.csv/json, curve plots, state.json and report.html.")
	ad := analysis.Defaults()
	var (
		ref        = fs.String("ref", "", "reference image (default: the first frame)")
		outDir     = fs.String("out", "series_results", "output folder")
		paramsFile = fs.String("params", "", "series parameters as JSON (flags below override it)")
		subset     = fs.Int("subset", 0, fmt.Sprintf("subset side in px, odd (default %d)", ad.Subset))
		step       = fs.Int("step", 0, fmt.Sprintf("grid step in px (default %d)", ad.Step))
		window     = fs.Int("strain-window", 0, fmt.Sprintf("strain window in grid points, odd (default %d)", ad.StrainWindow))
		roiRect    = fs.String("roi", "", roiHelp)
		maxPix     = fs.Int64("max-pixels", imageio.DefaultMaxPixels, "refuse images with more pixels than this (width × height)")
		mmPerPx    = fs.Float64("mm-per-px", 0, "scale in mm per px (0 = px)")
		calFile    = fs.String("calibration", "", "camera calibration `file` from mottle calibrate: positions undistorted, in mm in the specimen plane when the file has one (excludes --mm-per-px; extensometer and gauge coordinates stay reference-image px)")
		units      = fs.String("units", "", "units of extensometer and gauge coordinates: px or mm")
		incr       = fs.String("incremental", "", "auto (default), never or always")
		swZ        = fs.Float64("switch-zncc", 0, "mean ZNCC below which auto mode goes incremental (default 0.9)")
		swV        = fs.Float64("switch-valid", 0, "tracked fraction below which auto mode goes incremental (default 0.9)")
		retDirect  = fs.Bool("return-direct", false, "in auto mode, check each incremental frame against the reference and return to direct correlation when it passes the switch thresholds")
		maskFile   = fs.String("mask", "", "mask image `file` of the reference's size: pixels brighter than half the maximum are inside the ROI")
		table      = fs.String("table", "", "CSV with a header row: a key column frame (0 = reference), name or time_s, then time_s or time_ms and/or load_N or load_kN, e.g. \"frame,time_s,load_N\"")
		timePat    = fs.String("time-pattern", "", "regexp whose first group is the time stamp in each file name, e.g. _t([0-9.]+)s")
		timeScale  = fs.Float64("time-scale", 1, "factor from the --time-pattern number to seconds")
		fps        = fs.Float64("fps", 0, "frame rate: time = index/fps")
		fileTimes  = fs.Bool("file-times", false, "use the files' modification times as time stamps")
		area       = fs.Float64("area", 0, "initial cross-section in mm² (gives stress in MPa from load in N)")
		static     = fs.Int("static", 0, "number of frames after the reference taken without load (noise floor)")
		staticPair = fs.String("static-pair", "", "two images a,b of the unloaded specimen for the noise floor")
		axial      = fs.String("axial", "", "axial strain source: an extensometer name or gauge:NAME:E11 (default the first extensometer)")
		transverse = fs.String("transverse", "", "transverse strain source across the specimen (Poisson, r): extensometer or gauge:NAME:E22")
		modRange   = fs.String("modulus-range", "", "axial strain range lo,hi of the modulus fit (ASTM E111)")
		poisRange  = fs.String("poisson-range", "", "axial strain range lo,hi for Poisson's ratio (default the modulus range)")
		rRange     = fs.String("r-range", "", "axial strain range lo,hi for the r value (ISO 10113)")
		offset     = fs.Float64("offset", 0, "offset of the yield strength as a strain (default 0.002)")
		mapQ       = fs.String("maps", "E11,E22", "quantities drawn as maps for the selected frames")
		formats    = fs.String("formats", series.FrameFormats, "result formats of each frame's folder, comma-separated (see mottle analyze --help); more later with mottle export")
		mapEvery   = fs.Int("map-every", 0, "draw maps every N frames (default: about five frames spread over the series, and the last)")
		resume     = fs.Bool("resume", false, "continue a series stopped earlier, from <out>/state.json (its parameters are used)")
		live       = fs.Bool("live", false, "live mode: print each frame's extensometer and gauge values as a CSV line on stdout as soon as they exist (only the points they need are correlated), while the full field of each frame is computed behind and the folder results written as usual")
		liveJump   = fs.Float64("live-max-jump", 0, "with --live: a strain change from the last trusted value larger than this marks a reading untrusted (default 0.05; negative = no check)")
		exts, gs   listFlag
	)
	fs.Var(&exts, "ext", "virtual extensometer name:xA,yA,xB,yB (repeatable)")
	fs.Var(&gs, "gauge", "virtual gauge name:x0,y0,x1,y1 rectangle, or name:poly:x1,y1,x2,y2,... (repeatable)")
	pos, err := parseArgs(e, fs, args)
	if err != nil {
		return err
	}
	frames, err := series.ListFrames(pos)
	if err != nil {
		return err
	}
	if *ref != "" {
		// A folder or glob that holds the reference lists it too.
		frames = slices.DeleteFunc(frames, func(f string) bool { return filepath.Clean(f) == filepath.Clean(*ref) })
	}
	if *ref == "" {
		if len(frames) < 2 {
			fmt.Fprintln(e.stderr, "mottle series: give at least two frames (the first is the reference), or --ref and one frame")
			return errUsage
		}
		*ref, frames = frames[0], frames[1:]
	}
	if len(frames) == 0 {
		fmt.Fprintln(e.stderr, "mottle series: no frames to analyse")
		return errUsage
	}

	// Parameters: defaults, then the JSON file, then flags.
	p := series.Defaults()
	if *paramsFile != "" {
		b, err := os.ReadFile(*paramsFile)
		if err != nil {
			return fmt.Errorf("--params: %w", err)
		}
		if p, err = series.ParseParams(b); err != nil {
			return fmt.Errorf("--params %s: %w (analysis parameters at the top level or under \"analysis\", e.g. {\"subset\": 31, \"area_mm2\": 10}; the Settings of a report.html show every name)", *paramsFile, err)
		}
	}
	set := map[string]bool{}
	fs.Visit(func(f *flagT) { set[f.Name] = true })
	var errs []error
	if set["subset"] {
		p.Analysis.Subset = *subset
	}
	if set["step"] {
		p.Analysis.Step = *step
	}
	if set["strain-window"] {
		p.Analysis.StrainWindow = *window
	}
	if set["mm-per-px"] {
		p.Analysis.MMPerPx = *mmPerPx
	}
	if *calFile != "" {
		if c, err := calib.ReadFile(*calFile); err != nil {
			errs = append(errs, fmt.Errorf("--calibration: %w", err))
		} else {
			p.Analysis.Calibration, p.Analysis.CalibrationName = c.Compact(), filepath.Base(*calFile)
		}
	}
	if *roiRect != "" {
		if spec, err := parseROI(*roiRect); err != nil {
			errs = append(errs, err)
		} else {
			p.Analysis.ROI = spec
		}
	}
	if *units != "" {
		p.Units = *units
	}
	if *incr != "" {
		p.Incremental = *incr
	}
	if set["switch-zncc"] {
		p.SwitchZNCC = *swZ
	}
	if set["switch-valid"] {
		p.SwitchValid = *swV
	}
	if set["return-direct"] {
		p.ReturnDirect = *retDirect
	}
	if set["area"] {
		p.Area = *area
	}
	if set["static"] {
		p.StaticFrames = *static
	}
	ext, extErrs := parseExtensometers(exts)
	p.Extensometers = append(p.Extensometers, ext...)
	errs = append(errs, extErrs...)
	gauges, gaugeErrs := parseGauges(gs)
	p.Gauges = append(p.Gauges, gauges...)
	errs = append(errs, gaugeErrs...)
	pp := &p.Properties
	if *axial != "" {
		pp.Axial = *axial
	}
	if *transverse != "" {
		pp.Transverse = *transverse
	}
	for _, r := range []struct {
		s   string
		dst *[2]float64
		n   string
	}{{*modRange, &pp.ModulusRange, "--modulus-range"}, {*poisRange, &pp.PoissonRange, "--poisson-range"}, {*rRange, &pp.RRange, "--r-range"}} {
		if r.s == "" {
			continue
		}
		v, err := parseFloats(r.s, 2, r.n)
		if err != nil {
			errs = append(errs, err)
			continue
		}
		*r.dst = [2]float64{v[0], v[1]}
	}
	if set["offset"] {
		pp.Offset = *offset
	}
	if *staticPair != "" {
		if a, b, ok := strings.Cut(*staticPair, ","); !ok || a == "" || b == "" || strings.Contains(b, ",") {
			errs = append(errs, fmt.Errorf("--static-pair %q: want two images a,b of the unloaded specimen", *staticPair))
		}
	}
	set, ferr := results.ParseFormats(*formats)
	if ferr != nil {
		errs = append(errs, fmt.Errorf("--formats: %w", ferr))
	}
	if err := errors.Join(errs...); err != nil {
		fmt.Fprintln(e.stderr, "mottle series:", err)
		return errUsage
	}
	if err := series.CheckFrames(frames); err != nil {
		return err
	}

	lim := imageio.DefaultLimits()
	if *maxPix > 0 {
		lim.MaxPixels = *maxPix
	}
	refImg, err := imageio.ReadFile(*ref, lim)
	if err != nil {
		return limitHint(err, lim.MaxPixels)
	}
	// Every frame is turned by the reference's EXIF orientation: the
	// camera is on a fixture and does not turn during the test.
	orient := refImg.Orientation
	if refImg, err = imageio.Orient(refImg, orient); err != nil {
		return fmt.Errorf("reference %s: %w", *ref, err)
	}
	// Notes go to stdout, or to stderr in live mode, where stdout holds
	// the live CSV lines only; a live run reads each frame twice (live
	// values, then the full field), from two goroutines.
	notes := e.stdout
	if *live {
		notes = e.stderr
	}
	if !orient.Upright() {
		fmt.Fprintf(notes, "orientation: the reference's EXIF orientation %d (%s) applied to every frame\n", int(orient), orient)
	}
	var noteMu sync.Mutex
	noted := map[string]bool{}
	readFrame := func(path string) (*imageio.Gray, error) {
		g, err := imageio.ReadFile(path, lim)
		if err != nil {
			return nil, limitHint(err, lim.MaxPixels)
		}
		if g.Orientation != orient && !(g.Orientation.Upright() && orient.Upright()) {
			noteMu.Lock()
			if !noted[path] {
				noted[path] = true
				fmt.Fprintf(notes, "orientation: %s carries EXIF orientation %d, the reference %d; the reference's is used\n", filepath.Base(path), int(g.Orientation), int(orient))
			}
			noteMu.Unlock()
		}
		t, err := imageio.Orient(g, orient)
		if err != nil {
			return nil, fmt.Errorf("frame %s: %w", path, err)
		}
		return t, nil
	}
	if err := p.Validate(refImg.W, refImg.H); err != nil {
		return err
	}

	// Time stamps and loads.
	names := append([]string{*ref}, frames...)
	var tbl *series.Table
	if *table != "" {
		f, err := os.Open(*table)
		if err != nil {
			return fmt.Errorf("--table: %w", err)
		}
		tbl, err = series.ReadTable(f, *table)
		f.Close()
		if err != nil {
			return err
		}
	}
	metas, err := series.FrameMetas(names, series.TimeSource{Pattern: *timePat, Scale: *timeScale, FPS: *fps, FileTimes: *fileTimes}, tbl)
	if err != nil {
		return err
	}

	if *live && *resume {
		return fmt.Errorf("--live with --resume: a live run starts from the reference; leave one out")
	}
	var tr *series.Tracker
	var lv *series.Live
	first := 0
	if *resume {
		if *maskFile != "" {
			return fmt.Errorf("--mask with --resume: the saved state already holds the series' mask; leave --mask out")
		}
		if tr, first, err = series.Resume(*outDir, refImg, frames, readFrame); err != nil {
			return fmt.Errorf("--resume: %w", err)
		}
		p = tr.Params()
	} else {
		var opt series.Options
		if *maskFile != "" {
			if opt.Mask, err = imageio.ReadFile(*maskFile, lim); err != nil {
				return fmt.Errorf("--mask: %w", err)
			}
		}
		var lo *series.LiveOptions
		if *live {
			lo = &series.LiveOptions{MaxJump: *liveJump}
		}
		if tr, lv, err = series.Start(*outDir, refImg, metas[0], p, opt, lo); err != nil {
			return err
		}
	}

	var noise *series.NoiseFloor
	if *staticPair != "" {
		a, b, _ := strings.Cut(*staticPair, ",")
		if noise, err = staticPairNoise(ctx, a, b, p, lim); err != nil {
			return fmt.Errorf("static pair: %w", err)
		}
	}

	quantities := strings.Split(*mapQ, ",")
	if *mapQ == "" {
		quantities = nil
	}
	pr := newBar(e, "", "frames")
	pr.done0 = first
	cfg := series.RunConfig{Out: *outDir, Frames: frames, Metas: metas, RefName: filepath.Base(*ref),
		Orientation: orient, Formats: set, Maps: quantities, MapEvery: *mapEvery, First: first, Noise: noise,
		Read: readFrame, Progress: pr.show}
	out := e.stdout
	if lv != nil {
		// stdout holds the live CSV lines only.
		out = e.stderr
		w := csv.NewWriter(e.stdout)
		cfg.Live, cfg.LiveRecord = lv, func(rec []string) error {
			if err := w.Write(rec); err != nil {
				return err
			}
			w.Flush()
			return w.Error()
		}
	}
	c, runErr := series.Run(ctx, tr, cfg)
	pr.done()
	if runErr != nil {
		if ctx.Err() != nil {
			return fmt.Errorf("stopped after %d of %d frames; finished frames and the report are in %s (continue with --resume)", tr.Len(), len(frames), *outDir)
		}
		return fmt.Errorf("after %d of %d frames: %w (finished frames kept in %s)", tr.Len(), len(frames), runErr, *outDir)
	}
	m := c.Modes()
	returned, reacq := 0, 0
	for _, r := range c.Rows {
		reacq += r.Reacquired
		if r.ReturnedDirect {
			returned++
		}
	}
	extra := ""
	if returned > 0 || reacq > 0 {
		extra = fmt.Sprintf(" (%d returned to direct, %d points re-acquired)", returned, reacq)
	}
	fmt.Fprintf(out, "%d frames: %d direct, %d incremental%s. Results in %s (report.html).\n",
		tr.Len(), len(m[series.ModeDirect]), len(m[series.ModeIncremental]), extra, *outDir)
	printFlagged(out, c)
	props := c.Properties()
	for _, l := range props.Lines() {
		fmt.Fprintf(out, "  %s: %s\n", l[0], l[1])
	}
	printSkipped(out, props.Skipped)
	return nil
}

// skipHints names the flag that supplies what a skipped property lacks.
var skipHints = map[string]string{
	"youngs_modulus": "set --modulus-range lo,hi, with --area and a load --table",
	"poissons_ratio": "set --transverse and --poisson-range lo,hi or --modulus-range",
	"r_value":        "set --transverse and --r-range lo,hi",
	"offset_yield":   "needs the modulus: set --modulus-range lo,hi",
}

// printSkipped lists the material properties that were not computed, why,
// and which flags would supply them.
func printSkipped(w io.Writer, skipped map[string]string) {
	keys := make([]string, 0, len(skipped))
	for k := range skipped {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	for _, k := range keys {
		fmt.Fprintf(w, "  not computed: %s: %s", k, skipped[k])
		if h, ok := skipHints[k]; ok && (strings.Contains(skipped[k], "not set") || strings.HasPrefix(skipped[k], "needs") || strings.Contains(skipped[k], "no transverse")) {
			fmt.Fprintf(w, "; %s", h)
		}
		fmt.Fprintln(w)
	}
}

// flagT is the flag type Visit passes.
type flagT = flag.Flag

// staticPairNoise reads two images of the unloaded specimen and returns
// their noise floor (series.StaticPairNoise).
func staticPairNoise(ctx context.Context, a, b string, p series.Params, lim imageio.Limits) (*series.NoiseFloor, error) {
	ia, err := imageio.ReadFile(a, lim)
	if err != nil {
		return nil, limitHint(err, lim.MaxPixels)
	}
	ib, err := imageio.ReadFile(b, lim)
	if err != nil {
		return nil, limitHint(err, lim.MaxPixels)
	}
	return series.StaticPairNoise(ctx, ia, ib, filepath.Base(a), filepath.Base(b), p)
}

// parseGauges reads --gauge values, name:x0,y0,x1,y1 (a rectangle) or
// name:poly:x1,y1,x2,y2,… (a polygon) each, for series and stereo series;
// a malformed value gives an error naming it.
func parseGauges(gs []string) ([]series.Gauge, []error) {
	var out []series.Gauge
	var errs []error
	for _, s := range gs {
		name, rest, ok := strings.Cut(s, ":")
		if !ok {
			errs = append(errs, fmt.Errorf("--gauge %q: want name:x0,y0,x1,y1 or name:poly:x1,y1,…", s))
			continue
		}
		if poly, isPoly := strings.CutPrefix(rest, "poly:"); isPoly {
			n := strings.Count(poly, ",") + 1
			v, err := parseFloats(poly, n, "--gauge "+name)
			if err != nil || n%2 != 0 {
				errs = append(errs, fmt.Errorf("--gauge %q: polygon needs pairs x,y", s))
				continue
			}
			g := series.Gauge{Name: name}
			for i := 0; i < n; i += 2 {
				g.Polygon = append(g.Polygon, [2]float64{v[i], v[i+1]})
			}
			out = append(out, g)
			continue
		}
		v, err := parseFloats(rest, 4, "--gauge "+name)
		if err != nil {
			errs = append(errs, err)
			continue
		}
		out = append(out, series.Gauge{Name: name, Rect: &[4]float64{v[0], v[1], v[2], v[3]}})
	}
	return out, errs
}

// parseExtensometers reads --ext values, name:xA,yA,xB,yB each, for
// series and stereo series; a malformed value gives an error naming it.
func parseExtensometers(exts []string) ([]series.Extensometer, []error) {
	var out []series.Extensometer
	var errs []error
	for _, s := range exts {
		name, rest, ok := strings.Cut(s, ":")
		v, err := parseFloats(rest, 4, "--ext "+name)
		if !ok || err != nil {
			errs = append(errs, fmt.Errorf("--ext %q: want name:xA,yA,xB,yB", s))
			continue
		}
		out = append(out, series.Extensometer{Name: name, A: [2]float64{v[0], v[1]}, B: [2]float64{v[2], v[3]}})
	}
	return out, errs
}

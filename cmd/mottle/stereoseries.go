package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/series3d"
)

const stereoSeriesUsage = "--series --rig FILE --left FRAMES --right FRAMES [flags]"

const stereoSeriesDescription = `Analyse a test series measured with two cameras.

--left and --right each give a folder or a glob of the frames of one
camera, taken in pairs at the same moments; the first pair is the
reference. Every later pair is followed from the reference in both cameras
and triangulated. Extensometers (--ext) and gauges (--gauge) are drawn in
px of the left reference image; extensometer lengths are measured in space
between the 3D positions of their end points (mm), so that motion toward
or away from the cameras does not read as strain; gauges average the
surface strains of the points inside them.

Writes curve.csv (one row per frame, the columns of mottle series: stress,
extensometer lengths in mm and strains, gauge means), properties.json
(Young's modulus, Poisson's ratio, offset yield, ultimate strength, r value
where the inputs allow) and, in final/, the full field of the last frame.

Caution: the rig calibration's uncertainty adds to every value; confirm
critical results with a calibrated extensometer and leave design decisions
to the applicable codes and a licensed engineer.

Example:
  mottle stereo --series --rig rig.json --left 'left/*.png' --right 'right/*.png' \
    --ext axial:200,240,440,240 --ext width:320,180,320,300 --area 20 \
    --table loads.csv --modulus-range 0.0005,0.0025 --transverse width --out test7`

// runStereoSeries is "mottle stereo --series".
func runStereoSeries(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "stereo", stereoSeriesUsage, stereoSeriesDescription)
	fs.Bool("series", true, "analyse a series of pairs (this mode)")
	rigPath := fs.String("rig", "", "rig `file` written by mottle calibrate --stereo (required)")
	left := fs.String("left", "", "left camera frames: a folder or a glob (required)")
	right := fs.String("right", "", "right camera frames, in the same order (required)")
	out := fs.String("out", "stereo_series", "results `folder`")
	paramsFile := fs.String("params", "", "series parameters as JSON (subset, step, strain_window, prefilter_px, roi, extensometers, gauges, area_mm2, properties); flags override it")
	subset := fs.Int("subset", 0, "subset side, px (odd; default 31)")
	step := fs.Int("step", 0, "grid step, px (default 8)")
	window := fs.Int("strain-window", 0, "strain window, grid points (odd; default 5)")
	roiRect := fs.String("roi", "", roiHelp)
	area := fs.Float64("area", 0, "initial cross-section in mm² (gives stress in MPa from load in N)")
	resume := fs.Bool("resume", false, "continue a stereo series stopped earlier from <out>/state.json (its parameters are used; the reference pair must be the same)")
	incremental := fs.String("incremental", "", "how each pair is tracked: never (from the reference pair, the default), always (from the previous pair) or auto (from the previous pair once a frame keeps fewer than 90 % of the points or its mean ZNCC falls below 0.9)")
	static := fs.Int("static", 0, "number of pairs after the reference taken without load or motion: their spread is the noise floor (u, v, w in mm, surface strains) in the curve")
	table := fs.String("table", "", "CSV of loads and times with a header row (see mottle series --help)")
	axial := fs.String("axial", "", "axial strain source: an extensometer name or gauge:NAME:E11 (default the first extensometer)")
	transverse := fs.String("transverse", "", "transverse strain source (Poisson, r): an extensometer or gauge:NAME:E22")
	modRange := fs.String("modulus-range", "", "axial strain range lo,hi of the modulus fit (ASTM E111)")
	poisRange := fs.String("poisson-range", "", "axial strain range lo,hi for Poisson's ratio (default the modulus range)")
	var exts, gs listFlag
	fs.Var(&exts, "ext", "virtual extensometer name:xA,yA,xB,yB in left reference px (repeatable)")
	fs.Var(&gs, "gauge", "virtual gauge name:x0,y0,x1,y1 rectangle, or name:poly:x1,y1,x2,y2,..., in left reference px (repeatable)")
	pos, err := parseArgs(e, fs, args)
	if err != nil {
		return err
	}
	var errs []error
	if len(pos) > 0 {
		errs = append(errs, fmt.Errorf("unexpected argument %q: give the frames with --left and --right", pos[0]))
	}
	if *rigPath == "" {
		errs = append(errs, errors.New("--rig FILE is required (write one with mottle calibrate --stereo)"))
	}
	if *left == "" || *right == "" {
		errs = append(errs, errors.New("give the left frames with --left and the right frames with --right (a folder or a glob each)"))
	}
	var p series3d.Params
	if *paramsFile != "" {
		b, err := os.ReadFile(*paramsFile)
		if err != nil {
			errs = append(errs, fmt.Errorf("--params: %w", err))
		} else if err := json.Unmarshal(b, &p); err != nil {
			errs = append(errs, fmt.Errorf("--params %s: %w", *paramsFile, err))
		}
	}
	set := map[string]bool{}
	fs.Visit(func(f *flagT) { set[f.Name] = true })
	if *resume {
		for _, n := range []string{"params", "subset", "step", "strain-window", "roi", "area", "static", "incremental", "ext", "gauge", "axial", "transverse", "modulus-range", "poisson-range"} {
			if set[n] {
				errs = append(errs, fmt.Errorf("--%s with --resume: the series goes on with the parameters it was started with (in %s); leave --%[1]s out", n, stereoStateFile))
			}
		}
	}
	if set["subset"] {
		p.Subset = *subset
	}
	if set["step"] {
		p.Step = *step
	}
	if set["strain-window"] {
		p.StrainWindow = *window
	}
	if set["area"] {
		p.Area = *area
	}
	if set["static"] {
		p.StaticFrames = *static
	}
	if set["incremental"] {
		p.Incremental = *incremental
	}
	if *roiRect != "" {
		if spec, err := parseROI(*roiRect); err != nil {
			errs = append(errs, err)
		} else {
			p.ROI = spec
		}
	}
	ext, extErrs := parseExtensometers(exts)
	p.Extensometers = append(p.Extensometers, ext...)
	errs = append(errs, extErrs...)
	gauges, gaugeErrs := parseGauges(gs)
	p.Gauges = append(p.Gauges, gauges...)
	errs = append(errs, gaugeErrs...)
	if *axial != "" {
		p.Properties.Axial = *axial
	}
	if *transverse != "" {
		p.Properties.Transverse = *transverse
	}
	for _, r := range []struct {
		s   string
		dst *[2]float64
		n   string
	}{{*modRange, &p.Properties.ModulusRange, "--modulus-range"}, {*poisRange, &p.Properties.PoissonRange, "--poisson-range"}} {
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
	if err := errors.Join(errs...); err != nil {
		return usageError{err}
	}
	lf, err := series.ListFrames([]string{*left})
	if err != nil {
		return fmt.Errorf("--left: %w", err)
	}
	rf, err := series.ListFrames([]string{*right})
	if err != nil {
		return fmt.Errorf("--right: %w", err)
	}
	if len(lf) != len(rf) {
		return fmt.Errorf("--left gives %d frames but --right %d: the cameras' frames must come in pairs", len(lf), len(rf))
	}
	if len(lf) < 2 {
		return fmt.Errorf("--left and --right give %d pair: want the reference pair and at least one more", len(lf))
	}
	if err := series.CheckFrames(append(append([]string{}, lf...), rf...)); err != nil {
		return err
	}
	rfile, err := calib.ReadRigFile(*rigPath)
	if err != nil {
		return err
	}
	rig := rfile.Rig()
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
	metas, err := series.FrameMetas(lf, series.TimeSource{}, tbl)
	if err != nil {
		return err
	}
	read := func(k int) (l, r *imageio.Gray, err error) {
		if l, err = imageio.ReadFile(lf[k], imageio.DefaultLimits()); err != nil {
			return nil, nil, fmt.Errorf("image %s: %w", lf[k], err)
		}
		if r, err = imageio.ReadFile(rf[k], imageio.DefaultLimits()); err != nil {
			return nil, nil, fmt.Errorf("image %s: %w", rf[k], err)
		}
		return l, r, nil
	}
	l0, r0, err := read(0)
	if err != nil {
		return err
	}
	if err := os.MkdirAll(*out, 0o755); err != nil {
		return err
	}
	var s *series3d.Series
	start := 1
	if *resume {
		if s, start, err = resumeStereoSeries(*out, rig, l0, r0, lf, rf); err != nil {
			return fmt.Errorf("--resume: %w", err)
		}
		p = s.Params()
		if s.NeedsPrevious() {
			lp, rp, err := read(start - 1)
			if err != nil {
				return err
			}
			s.SetPrevious(lp, rp)
		}
		fmt.Fprintf(e.stdout, "resuming after pair %d of %d from %s\n", start-1, len(lf)-1, filepath.Join(*out, stereoStateFile))
	} else {
		if s, err = series3d.New(ctx, rig, l0, r0, metas[0], p); err != nil {
			return fmt.Errorf("%s + %s: %w", lf[0], rf[0], err)
		}
		fmt.Fprintf(e.stdout, "reference: %d of %d points matched and triangulated\n", s.Reference().OK(), len(s.Reference().Points))
	}
	var last *series3d.Frame
	var lastL *imageio.Gray
	for k := start; k < len(lf); k++ {
		l, r, err := read(k)
		if err != nil {
			return err
		}
		fr, row, err := s.Add(ctx, l, r, metas[k])
		if err != nil {
			if ctx.Err() != nil {
				return fmt.Errorf("stopped after %d of %d pairs; continue with --resume: %w", k-1, len(lf)-1, err)
			}
			return err
		}
		if err := saveStereoSeries(*out, s, lf[0], rf[0]); err != nil {
			return err
		}
		last, lastL = fr, l
		line := fmt.Sprintf("frame %d %s: %.0f %% of the points tracked", k, filepath.Base(lf[k]), 100*row.Tracked)
		for _, x := range row.Extensometers {
			if x.Valid {
				line += fmt.Sprintf(", %s %.6f", x.Name, x.Eng)
			}
		}
		fmt.Fprintln(e.stdout, line)
	}
	c := s.Curve()
	var b strings.Builder
	if err := c.WriteCSV(&b); err != nil {
		return err
	}
	if err := os.WriteFile(filepath.Join(*out, "curve.csv"), []byte(b.String()), 0o644); err != nil {
		return err
	}
	props := s.Properties()
	doc := map[string]any{"rig": *rigPath, "params": s.Params(), "properties": props}
	if c.Noise != nil {
		doc["noise_floor"] = c.Noise
		fmt.Fprintf(e.stdout, "noise floor of %d static pairs (std): u %.5f, v %.5f, w %.5f mm; E11 %.2g, E22 %.2g, E12 %.2g\n", c.Noise.Frames,
			c.Noise.Std["u"], c.Noise.Std["v"], c.Noise.Std["w"], c.Noise.Std["E11"], c.Noise.Std["E22"], c.Noise.Std["E12"])
	}
	pj, _ := json.MarshalIndent(doc, "", "  ")
	if err := os.WriteFile(filepath.Join(*out, "properties.json"), append(pj, '\n'), 0o644); err != nil {
		return err
	}
	for _, ln := range props.Lines() {
		fmt.Fprintf(e.stdout, "%s: %s\n", ln[0], ln[1])
	}
	for k, why := range props.Skipped {
		fmt.Fprintf(e.stdout, "%s not computed: %s\n", k, why)
	}
	// The full field of the last frame.
	sw := p.StrainWindow
	if sw == 0 {
		sw = 5
	}
	in := results.StereoInput{Ref: s.Reference(), Frame: s.SpecimenFrame(), StrainWindow: sw, State: last.State, Surface: last.Surface}
	f, err := results.BuildStereo(in, map[string]any{"rig": *rigPath, "series": s.Params()}, "mottle "+version)
	if err != nil {
		return err
	}
	f.Meta.Reference, f.Meta.Deformed = lf[0], lf[len(lf)-1]
	set2, _ := results.ParseFormats("json,csv,vts,maps")
	delete(set2, results.Spatial)
	if _, err := results.Write(ctx, filepath.Join(*out, "final"), f, results.Sources{Ref: l0, Def: lastL}, set2); err != nil {
		return err
	}
	fmt.Fprintf(e.stdout, "wrote curve.csv, properties.json and final/ to %s\n", *out)
	return nil
}

// stereoStateFile is the state of a stereo series in its results folder,
// rewritten after each pair, from which --resume continues.
const stereoStateFile = "state.json"

// stereoSaved is the document of stereoStateFile: the reference pair's
// file names, the parameters and the series3d state.
type stereoSaved struct {
	LeftReference  string          `json:"left_reference"`
	RightReference string          `json:"right_reference"`
	Params         series3d.Params `json:"params"`
	State          series3d.State  `json:"state"`
}

// saveStereoSeries writes the state of s to out/state.json, replacing the
// old one only once the new one is complete.
func saveStereoSeries(out string, s *series3d.Series, left, right string) error {
	b, err := json.Marshal(stereoSaved{LeftReference: filepath.Base(left), RightReference: filepath.Base(right), Params: s.Params(), State: s.State()})
	if err != nil {
		return fmt.Errorf("stereo series state: %w", err)
	}
	path := filepath.Join(out, stereoStateFile)
	if err := os.WriteFile(path+".tmp", b, 0o644); err != nil {
		return err
	}
	return os.Rename(path+".tmp", path)
}

// resumeStereoSeries restores the stereo series saved in out/state.json
// on the reference pair l0, r0 (the files lf[0], rf[0]) and returns it with
// the index of the next pair to add.
func resumeStereoSeries(out string, rig *calib.Rig, l0, r0 *imageio.Gray, lf, rf []string) (*series3d.Series, int, error) {
	path := filepath.Join(out, stereoStateFile)
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, 0, fmt.Errorf("the state of the stopped series: %w", err)
	}
	var sv stereoSaved
	if err := json.Unmarshal(b, &sv); err != nil {
		return nil, 0, fmt.Errorf("%s: %w", path, err)
	}
	if sv.LeftReference != filepath.Base(lf[0]) || sv.RightReference != filepath.Base(rf[0]) {
		return nil, 0, fmt.Errorf("%s was made with the reference pair %s + %s, but the first pair given is %s + %s: give the same --left and --right",
			path, sv.LeftReference, sv.RightReference, filepath.Base(lf[0]), filepath.Base(rf[0]))
	}
	done := len(sv.State.Rows) - 1
	if done < 0 {
		return nil, 0, fmt.Errorf("%s holds no reference; start the series again without --resume", path)
	}
	if done >= len(lf)-1 {
		return nil, 0, fmt.Errorf("%s holds %d pairs after the reference and %d are given: nothing left to add (add the new pairs to --left and --right)", path, done, len(lf)-1)
	}
	s, err := series3d.Restore(rig, l0, r0, sv.Params, sv.State)
	if err != nil {
		return nil, 0, fmt.Errorf("%s: %w", path, err)
	}
	return s, done + 1, nil
}

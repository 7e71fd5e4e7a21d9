package main

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
	"github.com/mottledic/mottle/pkg/spline"
	"github.com/mottledic/mottle/pkg/stereo"
)

const stereoDescription = `Measure 3D shape, 3D displacement and surface strain with two cameras.

Give the rig file written by "mottle calibrate --stereo", the left and the
right reference image, and optionally the left and the right deformed image
(taken at the same moment). Every left subset is found in the right image
(seeded along its epipolar line, refined with a second-order shape
function), followed over time in each camera, and triangulated with the
lens distortion removed (the optimal correction of Hartley & Sturm 1997).
Strains are computed in the local tangent plane of the measured surface.

Results (lengths in mm) are in the specimen frame: origin at the centre of
the reference shape, z along its mean normal toward the cameras, x along
the left image's x. x_mm, y_mm, z_mm are the shape; u, v, w the 3D
displacement; E11 … the surface strains; w_normal the displacement along
the local normal. The VTS file shows the surface in place in ParaView.
Maps are drawn over the left reference image.

Caution: the rig calibration's uncertainty adds to every value; confirm
critical strains with a calibrated extensometer and leave design decisions
to the applicable codes and a licensed engineer.

A series of pairs, with extensometers and gauges measured in space and
material properties: mottle stereo --series (see mottle stereo --series --help).

Example:
  mottle stereo --rig rig.json L0.png R0.png L5.png R5.png --out run5`

func runStereo(ctx context.Context, e *env, args []string) error {
	for _, a := range args {
		if a == "--series" || a == "-series" {
			return runStereoSeries(ctx, e, args)
		}
	}
	fs := newFlags(e, "stereo", "--rig FILE LEFT_REF RIGHT_REF [LEFT_DEF RIGHT_DEF] [flags]", stereoDescription)
	rigPath := fs.String("rig", "", "rig `file` written by mottle calibrate --stereo (required)")
	out := fs.String("out", "stereo", "results `folder`")
	subset := fs.Int("subset", correlate.DefaultSubset, "subset side, px (odd)")
	step := fs.Int("step", correlate.DefaultStep, "grid step, px")
	window := fs.Int("strain-window", 5, "strain window, grid points (odd)")
	prefilter := fs.Float64("prefilter", 0.7, "Gaussian prefilter σ, px, against interpolation bias (0 = off)")
	minDepth := fs.Float64("min-depth", 0, "nearest depth of the epipolar search, mm from the left camera (0 = half the working distance)")
	maxDepth := fs.Float64("max-depth", 0, "farthest depth of the epipolar search, mm (0 = twice the working distance)")
	formats := fs.String("formats", "npz,json,csv,vts,maps", "result `formats` (see mottle export --help)")
	paths, err := parseArgs(e, fs, args)
	if err != nil {
		return err
	}
	var errs []error
	if *rigPath == "" {
		errs = append(errs, errors.New("--rig FILE is required (write one with mottle calibrate --stereo)"))
	}
	if len(paths) != 2 && len(paths) != 4 {
		errs = append(errs, fmt.Errorf("give 2 images (left and right reference) or 4 (and left and right deformed), not %d", len(paths)))
	}
	set, err := results.ParseFormats(*formats)
	if err != nil {
		errs = append(errs, err)
	}
	if err := errors.Join(errs...); err != nil {
		return usageError{err}
	}
	// The spatial view and the deformed-image maps need a 2D field.
	delete(set, results.Spatial)
	rf, err := calib.ReadRigFile(*rigPath)
	if err != nil {
		return err
	}
	rig := rf.Rig()
	imgs := make([]*imageio.Gray, len(paths))
	for k, p := range paths {
		g, err := imageio.ReadFile(p, imageio.DefaultLimits())
		if err != nil {
			return fmt.Errorf("image %s: %w", p, err)
		}
		imgs[k] = g
	}
	o := stereo.Options{Correlate: correlate.Options{Subset: *subset, Step: *step, Interp: spline.Quintic, Prefilter: *prefilter},
		MinDepth: *minDepth, MaxDepth: *maxDepth}
	ref, err := stereo.Match(ctx, rig, imgs[0], imgs[1], o)
	if err != nil {
		return fmt.Errorf("%s + %s: %w", paths[0], paths[1], err)
	}
	fmt.Fprintf(e.stdout, "reference: %d of %d points matched and triangulated\n", ref.OK(), len(ref.Points))
	frame, err := stereo.SpecimenFrame(ref)
	if err != nil {
		return err
	}
	in := results.StereoInput{Ref: ref, Frame: frame, StrainWindow: *window}
	if len(imgs) == 4 {
		st, err := ref.Track(ctx, imgs[0], imgs[1], imgs[2], imgs[3])
		if err != nil {
			return fmt.Errorf("%s + %s: %w", paths[2], paths[3], err)
		}
		sf, err := stereo.Strain(ref, st, stereo.StrainOptions{Window: *window})
		if err != nil {
			return usageError{err}
		}
		in.State, in.Surface = st, sf
		fmt.Fprintf(e.stdout, "deformed: %d points tracked in both cameras\n", st.OK())
	}
	params := map[string]any{"rig": *rigPath, "images": paths, "subset": *subset, "step": *step,
		"strain_window": *window, "prefilter_px": *prefilter, "min_depth_mm": o.MinDepth, "max_depth_mm": o.MaxDepth}
	f, err := results.BuildStereo(in, params, "mottle "+version)
	if err != nil {
		return err
	}
	f.Meta.Reference = paths[0]
	if len(paths) == 4 {
		f.Meta.Deformed = paths[2]
	}
	src := results.Sources{Ref: imgs[0]}
	if len(imgs) == 4 {
		src.Def = imgs[2]
	}
	written, err := results.Write(ctx, *out, f, src, set)
	if err != nil {
		return err
	}
	printStereo(e, f)
	fmt.Fprintf(e.stdout, "wrote %d files to %s\n", len(written), *out)
	return nil
}

func printStereo(e *env, f *field.Field) {
	for _, q := range []string{"z_mm", "std_z_mm", "u", "v", "w", "E11", "E22", "E12", "E_max", "E_min"} {
		if _, ok := f.Get(q); !ok {
			continue
		}
		s, err := f.Summary(q)
		if err != nil || s.Count == 0 {
			continue
		}
		fmt.Fprintf(e.stdout, "%-9s mean %12.6g  std %10.3g  (%d points, %s)\n", q, s.Mean, s.Std, s.Count, f.Units[q])
	}
	var bad []string
	for st, n := range f.StatusCounts() {
		if st != "ok" {
			bad = append(bad, fmt.Sprintf("%s %d", st, n))
		}
	}
	sort.Strings(bad)
	if len(bad) > 0 {
		fmt.Fprintf(e.stdout, "not measured: %s\n", strings.Join(bad, ", "))
	}
}

const stereoCalibrateUsage = "--stereo LEFT... --right RIGHT... --target FILE.json [--out rig.json]"

// runCalibrateStereo is "mottle calibrate --stereo": the images after
// --stereo up to --right are the left camera's, those after --right the
// right camera's, in the same order.
func runCalibrateStereo(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "calibrate", stereoCalibrateUsage, calibrateDescription)
	target := fs.String("target", "", "target geometry `file` written by mottle target (required)")
	out := fs.String("out", "rig.json", "rig `file` to write")
	fixK3 := fs.Bool("fix-k3", false, "hold k3 at 0 in both cameras (long lenses, little distortion)")
	fixTan := fs.Bool("fix-tangential", false, "hold p1 and p2 at 0")
	maxTilt := fs.Float64("max-tilt", 65, "reject views tilted more than this many degrees")
	fs.Bool("stereo", true, "calibrate a stereo rig: LEFT images after --stereo, RIGHT images after --right")
	var left, right, rest []string
	side := 0 // 0: not in an image list, 1: left, 2: right
	for i := 0; i < len(args); i++ {
		a := args[i]
		switch {
		case a == "--stereo" || a == "-stereo":
			side = 1
		case a == "--right" || a == "-right":
			side = 2
		case strings.HasPrefix(a, "-"):
			side = 0
			rest = append(rest, a)
			if !strings.Contains(a, "=") && i+1 < len(args) && a != "--fix-k3" && a != "--fix-tangential" && a != "-h" && a != "--help" {
				i++
				rest = append(rest, args[i])
			}
		case side == 1:
			left = append(left, a)
		case side == 2:
			right = append(right, a)
		default:
			rest = append(rest, a)
		}
	}
	pos, err := parseArgs(e, fs, rest)
	if err != nil {
		return err
	}
	var errs []error
	if len(pos) > 0 {
		errs = append(errs, fmt.Errorf("unexpected argument %q: give the left images after --stereo and the right images after --right", pos[0]))
	}
	if *target == "" {
		errs = append(errs, errors.New("--target FILE.json is required (write one with mottle target)"))
	}
	if len(left) == 0 || len(right) == 0 {
		errs = append(errs, errors.New("give the left images after --stereo and the right images after --right, in the same order (10–20 pairs)"))
	}
	if err := errors.Join(errs...); err != nil {
		return usageError{err}
	}
	t, err := calib.ReadTarget(*target)
	if err != nil {
		return err
	}
	read := func(ps []string) ([]calib.Image, error) {
		var out []calib.Image
		for _, p := range ps {
			g, err := imageio.ReadFile(p, imageio.DefaultLimits())
			if err != nil {
				return nil, fmt.Errorf("calibration image %s: %w", p, err)
			}
			out = append(out, calib.Image{Name: p, Gray: g})
		}
		return out, nil
	}
	li, err := read(left)
	if err != nil {
		return err
	}
	ri, err := read(right)
	if err != nil {
		return err
	}
	res, rejected, err := calib.CalibrateStereoImages(ctx, li, ri, t, calib.DetectOptions{MaxTilt: *maxTilt},
		calib.Options{FixK3: *fixK3, FixTangential: *fixTan})
	if err != nil {
		return err
	}
	var b bytes.Buffer
	if err := calib.NewRigFile(res, t, rejected, time.Now()).Write(&b); err != nil {
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
	for _, x := range rejected {
		fmt.Fprintf(e.stdout, "%s rejected: %s (%s)\n", x.Image, x.Reason, x.Detail)
	}
	s := res.Std
	fmt.Fprintf(e.stdout, "%d pairs; reprojection RMS left %.4f px, right %.4f px\n", len(res.Views), res.RMSLeft, res.RMSRight)
	fmt.Fprintf(e.stdout, "baseline %.3f mm, angle between the axes %.3f°; translation (%.3f ± %.3f, %.3f ± %.3f, %.3f ± %.3f) mm\n",
		res.Rig.Baseline(), res.Rig.Angle(), res.Rig.T[0], s[21], res.Rig.T[1], s[22], res.Rig.T[2], s[23])
	fmt.Fprintf(e.stdout, "wrote %s\n", *out)
	return nil
}

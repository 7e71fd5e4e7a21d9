package main

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"text/tabwriter"
	"time"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/imageio"
)

const calibrateDescription = `Calibrate the camera from images of a flat target.

Give 10–20 images of the target written by "mottle target", taken with the
lens, focus and aperture of the measurement, the target tilted 10–40° in
different directions and reaching into the image corners in some views.
Mottle finds the target points to sub-pixel accuracy, rejects images it
cannot use (saying why), fits a pinhole camera with radial (k1, k2, k3) and
tangential (p1, p2) distortion — Zhang's closed form (2000) refined by
Levenberg–Marquardt — and writes the calibration to --out in Mottle's JSON
format (format "mottle-camera/1"; see DEVELOPERS.md). Views whose residuals
stand out are flagged.

--plane names the image whose target lay in the specimen plane: with it,
"mottle analyze --calibration" gives positions and displacements in mm in
that plane, which also removes the effect of a camera not square to the
specimen. Without it, positions are undistorted pixels.

Caution: the uncertainty of the calibration adds to that of every
measurement; confirm critical results with a calibrated extensometer.

--stereo calibrates a pair of cameras (a rig for "mottle stereo"): the left
images follow --stereo and the right images, taken at the same moments and
in the same order, follow --right; both cameras and the pose of the right
camera relative to the left are fitted together and written to --out
(format "mottle-rig/1", default rig.json) with the baseline and the angle
between the optical axes.

Example:
  mottle calibrate cal/*.png --target board.json --plane cal/specimen.png --out camera.json
  mottle calibrate --stereo cal/L*.png --right cal/R*.png --target board.json --out rig.json`

func runCalibrate(ctx context.Context, e *env, args []string) error {
	for _, a := range args {
		if a == "--stereo" || a == "-stereo" {
			return runCalibrateStereo(ctx, e, args)
		}
	}
	fs := newFlags(e, "calibrate", "IMAGES... --target FILE.json [flags]", calibrateDescription)
	target := fs.String("target", "", "target geometry `file` written by mottle target (required)")
	out := fs.String("out", "camera.json", "calibration `file` to write")
	plane := fs.String("plane", "", "the `image` (one of IMAGES) whose target lay in the specimen plane")
	fixK3 := fs.Bool("fix-k3", false, "hold k3 at 0 (lenses with little distortion)")
	fixTan := fs.Bool("fix-tangential", false, "hold p1 and p2 at 0")
	maxTilt := fs.Float64("max-tilt", 65, "reject views tilted more than this many degrees")
	paths, err := parseArgs(e, fs, args)
	if err != nil {
		return err
	}
	var errs []error
	if *target == "" {
		errs = append(errs, errors.New("--target FILE.json is required (write one with mottle target)"))
	}
	if len(paths) == 0 {
		errs = append(errs, errors.New("give the calibration images (10–20 views of the target)"))
	}
	if err := errors.Join(errs...); err != nil {
		return usageError{err}
	}
	t, err := calib.ReadTarget(*target)
	if err != nil {
		return err
	}
	var imgs []calib.Image
	for _, p := range paths {
		g, err := imageio.ReadFile(p, imageio.DefaultLimits())
		if err != nil {
			return fmt.Errorf("calibration image %s: %w", p, err)
		}
		imgs = append(imgs, calib.Image{Name: p, Gray: g})
	}
	res, rejected, err := calib.CalibrateImages(ctx, imgs, t, calib.DetectOptions{MaxTilt: *maxTilt},
		calib.Options{FixK3: *fixK3, FixTangential: *fixTan})
	if err != nil {
		return err
	}
	f := calib.NewFile(res, t, rejected, time.Now())
	if *plane != "" {
		if err := f.SetPlane(*plane); err != nil {
			return usageError{err}
		}
	}
	var b bytes.Buffer
	if err := f.Write(&b); err != nil {
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
	printCalibration(e, res, rejected, *out)
	return nil
}

func printCalibration(e *env, r *calib.Result, rejected []calib.Rejected, out string) {
	w := tabwriter.NewWriter(e.stdout, 0, 0, 2, ' ', 0)
	fmt.Fprintf(w, "image\tpoints\tRMS px\tmax px\ttilt °\t\n")
	for _, v := range r.Views {
		flag := ""
		if v.Outlier {
			flag = "stands out: check this view"
		}
		fmt.Fprintf(w, "%s\t%d\t%.4f\t%.4f\t%.1f\t%s\n", v.Name, v.N, v.RMS, v.Max, v.Pose.Tilt(), flag)
	}
	for _, x := range rejected {
		fmt.Fprintf(w, "%s\t—\t\t\t\trejected: %s (%s)\n", x.Image, x.Reason, x.Detail)
	}
	w.Flush()
	c := r.Camera
	s := r.Std
	fmt.Fprintf(e.stdout, "\n%d views, %d points, reprojection RMS %.4f px\n", len(r.Views), r.Points, r.RMS)
	fmt.Fprintf(e.stdout, "fx %.3f ± %.3f px   fy %.3f ± %.3f px   cx %.3f ± %.3f px   cy %.3f ± %.3f px\n", c.Fx, s[0], c.Fy, s[1], c.Cx, s[2], c.Cy, s[3])
	fmt.Fprintf(e.stdout, "k1 %.6f ± %.6f   k2 %.5f ± %.5f   k3 %.4f ± %.4f   p1 %.3e ± %.1e   p2 %.3e ± %.1e\n", c.K1, s[4], c.K2, s[5], c.K3, s[8], c.P1, s[6], c.P2, s[7])
	fmt.Fprintf(e.stdout, "wrote %s\n", out)
}

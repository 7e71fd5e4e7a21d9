package analysis

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/kinematics"
	"github.com/mottledic/mottle/pkg/quality"
	"github.com/mottledic/mottle/pkg/results"
	"github.com/mottledic/mottle/pkg/roi"
	"github.com/mottledic/mottle/pkg/spline"
)

// Software names the program in the metadata of every result.
const Software = "mottle 0.1"

// Job is one analysis: the two images and everything that is not a
// serialisable parameter.
type Job struct {
	Ref, Def *imageio.Gray
	// RefName and DefName name the images in the metadata (file names).
	RefName, DefName string
	// Mask is an optional ROI mask image, intersected with Params.ROI.
	Mask *imageio.Gray
	// Params are the analysis parameters.
	Params Params
	// Start is an optional starting guess per grid point (an earlier result
	// on the same grid), used by series to start from the previous frame.
	Start []correlate.Point
	// Progress, if not nil, receives the correlation progress.
	Progress func(done, total int)
	// Quality, if not nil, is the image quality of Ref and Def already
	// assessed by the caller (quality.AssessPair over the same ROI); nil =
	// RunJob assesses it.
	Quality []quality.Report
	// RefMeasures, if not nil (and Quality is nil), returns the
	// reference's quality measures from an earlier analysis of the same
	// reference image over the same ROI (Output.RefMeasures), or nil when
	// there are none: only the deformed image is measured then. The
	// reports are the same. RunJob calls it beside the correlation, so a
	// look-up that reads the whole reference does not delay it.
	RefMeasures func() *quality.Measures
	// Threads, if above 0, is the thread count the correlation and the
	// field builder use instead of Params.Threads. The field records
	// Params.Threads: results never depend on the thread count, so a job
	// may take whatever cores are idle without a byte of its files
	// changing.
	Threads int
}

// Output is the result of an analysis: the field and the correlation result
// it was computed from.
type Output struct {
	Field       *field.Field
	Correlation *correlate.Result
	// Quality holds the image quality of the reference and the deformed
	// image (package quality), also stored in Field.Meta.Extra["image_quality"].
	Quality []quality.Report
	// RefMeasures are the reference's quality measures as quality.Measure
	// gives them (before the report cleans them), for Job.RefMeasures of a
	// later analysis of the same reference and ROI; zero when the caller
	// gave Job.Quality.
	RefMeasures quality.Measures
	// Elapsed is the wall time of correlation and kinematics.
	Elapsed time.Duration
}

// Run analyses a reference and a deformed image with parameters p and
// returns the result field. progress may be nil. Errors name the image or
// parameter at fault; parameter problems come as a *ValidationError.
func Run(ctx context.Context, ref, def *imageio.Gray, p Params, progress func(done, total int)) (*field.Field, error) {
	out, err := RunJob(ctx, Job{Ref: ref, Def: def, Params: p, Progress: progress})
	if err != nil {
		return nil, err
	}
	return out.Field, nil
}

// RunJob is Run with the full set of inputs of a Job.
func RunJob(ctx context.Context, j Job) (*Output, error) {
	start := time.Now()
	if j.Ref == nil || j.Def == nil {
		return nil, errors.New("analysis needs both a reference and a deformed image")
	}
	p := j.Params
	if err := p.Validate(j.Ref.W, j.Ref.H); err != nil {
		return nil, err
	}
	opt, err := CorrelationOptions(p, j.Ref.W, j.Ref.H, j.Mask)
	if err != nil {
		if perr := imageio.CheckPair(j.Ref, j.Def, p.Subset); perr != nil {
			return nil, perr
		}
		return nil, err
	}
	opt.Start, opt.Progress = j.Start, j.Progress
	if j.Threads > 0 {
		opt.Threads = j.Threads
	}
	// The pair checks (sizes, contrast) and the image quality are done
	// while the images are correlated (they read them only; the correlator
	// checks the sizes it needs itself). A failed check or a quality error
	// stops the correlation and is the job's error, a failed check first,
	// as if they had run before it.
	qual := j.Quality
	var refM quality.Measures
	var perr, qerr error
	qdone := make(chan struct{})
	cctx, cancel := context.WithCancel(ctx)
	defer cancel()
	go func() {
		defer close(qdone)
		if perr = imageio.CheckPair(j.Ref, j.Def, p.Subset); perr != nil {
			cancel()
			return
		}
		if qual != nil {
			return
		}
		var known *quality.Measures
		if j.RefMeasures != nil {
			known = j.RefMeasures()
		}
		if qual, refM, qerr = quality.AssessPairWith(j.Ref, known, j.Def, opt.Mask, quality.Thresholds{}); qerr != nil {
			cancel()
		}
	}()
	res, err := correlate.Run(cctx, j.Ref, j.Def, opt)
	<-qdone
	if perr != nil {
		return nil, perr
	}
	if qerr != nil {
		return nil, qerr
	}
	if err != nil {
		return nil, fmt.Errorf("correlation: %w", err)
	}
	f, err := buildField(ctx, res, p, j.Threads)
	if err != nil {
		return nil, err
	}
	f.Meta.Reference, f.Meta.Deformed = j.RefName, j.DefName
	f.Meta.ImageWidth, f.Meta.ImageHeight = j.Ref.W, j.Ref.H
	f.Meta.Extra["image_quality"] = plain(qual)
	elapsed := time.Since(start)
	f.Meta.Extra["elapsed_s"] = math.Round(elapsed.Seconds()*1000) / 1000
	if s := elapsed.Seconds(); s > 0 {
		f.Meta.Extra["points_per_second"] = math.Round(float64(res.Grid.Len()) / s)
	}
	return &Output{Field: f, Correlation: res, Quality: qual, RefMeasures: refM, Elapsed: elapsed}, nil
}

// CorrelationOptions turns the parameters into correlator options for
// w×h images, building the ROI mask from p.ROI intersected with the
// optional mask image. Start and Progress are left for the caller.
func CorrelationOptions(p Params, w, h int, maskImage *imageio.Gray) (correlate.Options, error) {
	opt := correlate.Defaults()
	opt.Subset, opt.Step = p.Subset, p.Step
	opt.Shape = correlate.First
	if p.Shape == "second" {
		opt.Shape = correlate.Second
	}
	order, err := spline.ParseOrder(p.Interpolation)
	if err != nil {
		return opt, &ValidationError{[]Problem{{Field: "interpolation", Message: err.Error()}}}
	}
	opt.Interp = order
	opt.Prefilter = p.Prefilter
	opt.Seeds = p.Seeds
	opt.Search = p.Search
	opt.MinZNCC = p.MinZNCC
	opt.MaxIter = p.MaxIter
	opt.Tol = p.Tolerance
	opt.Threads = p.Threads
	opt.Noise = p.Noise
	var mask *roi.Mask
	if p.ROI != nil {
		if mask, err = p.ROI.Mask(w, h); err != nil {
			return opt, &ValidationError{[]Problem{{Field: "roi", Message: err.Error()}}}
		}
	}
	if maskImage != nil {
		m, err := roi.FromImage(maskImage, w, h)
		if err != nil {
			return opt, fmt.Errorf("mask image: %w", err)
		}
		if mask == nil {
			mask = m
		} else if mask, err = mask.Intersect(m); err != nil {
			return opt, fmt.Errorf("mask image: %w", err)
		}
	}
	opt.Mask = mask
	if err := opt.Validate(); err != nil {
		return opt, fmt.Errorf("correlation options: %w", err)
	}
	return opt, nil
}

// Kinematics derives the result field from a correlation result with the
// one field builder, results.Build: the displacement gradient by the
// strain-window fit, every strain measure, rotation and principal values,
// with the propagated uncertainty. Lengths are in mm when p sets a scale.
func Kinematics(ctx context.Context, res *correlate.Result, p Params) (*field.Field, error) {
	return buildField(ctx, res, p, 0)
}

// buildField is Kinematics on threads threads (0: p.Threads), recording p.
func buildField(ctx context.Context, res *correlate.Result, p Params, threads int) (*field.Field, error) {
	if _, err := kinematics.ParseFit(p.StrainFit); err != nil {
		return nil, &ValidationError{[]Problem{{Field: "strain_fit", Message: err.Error()}}}
	}
	o := BuildOptions(p)
	if threads > 0 {
		o.Threads = threads
	}
	f, err := results.Build(ctx, results.FromCorrelation(res, p.Subset), o)
	if err != nil {
		return nil, err
	}
	SetCalibrationMeta(f, p)
	f.Meta.NoiseSigma = res.Noise
	f.Meta.Extra["noise_source"] = res.NoiseSource
	f.Meta.Extra["seeds"] = plain(res.Seeds)
	f.Meta.Extra["stats"] = plain(res.Stats)
	return f, nil
}

// plain returns v as the JSON value it encodes to (maps, slices, numbers),
// so the metadata in memory is what a stored result reads back, key order
// and all.
func plain(v any) any {
	b, err := json.Marshal(v)
	if err != nil {
		return v
	}
	var out any
	if json.Unmarshal(b, &out) != nil {
		return v
	}
	return out
}

// BuildOptions returns the field builder's options for parameters p: the
// strain window and fit, the threads, the scale (lengths in mm whenever p
// sets one) or the calibration's position mapping, and p itself as the
// field's parameters.
func BuildOptions(p Params) results.Options {
	o := results.Options{StrainWindow: p.StrainWindow, StrainFit: p.StrainFit, Threads: p.Threads,
		MMPerPx: p.Scale(), Params: p, Software: Software}
	if m := p.Mapping(); m != nil {
		o.Mapping, o.Length, o.MMPerPx = m, m.Unit(), 0
	}
	return o
}

// Mapping returns the position mapping of p's calibration, or nil without
// one (or with an invalid one, which Validate reports).
func (p Params) Mapping() *calib.Mapping {
	if p.Calibration == nil {
		return nil
	}
	m, err := p.Calibration.Mapping(p.CalibrationName)
	if err != nil {
		return nil
	}
	return m
}

// LengthUnit returns the unit of output lengths under p: "mm" with a scale
// or a calibration with a specimen plane, else "px".
func (p Params) LengthUnit() string {
	if m := p.Mapping(); m != nil {
		return m.Unit()
	}
	if p.Scale() > 0 {
		return "mm"
	}
	return "px"
}

// SetCalibrationMeta records in f's metadata which calibration made its
// positions (file name, date, reprojection RMS, unit, specimen-plane view)
// and its caution; nothing without a calibration.
func SetCalibrationMeta(f *field.Field, p Params) {
	c := p.Calibration
	if c == nil {
		return
	}
	m := map[string]any{"name": p.CalibrationName, "created": c.Created, "rms_px": c.RMS,
		"image_size_px": c.Image, "unit": p.LengthUnit(), "caution": calib.Caution}
	if c.Plane != nil {
		m["plane_image"] = c.Plane.Image
	}
	f.Meta.Extra["calibration"] = m
	f.Meta.Cautions = append(f.Meta.Cautions, "Positions and displacements were corrected with the camera calibration "+p.CalibrationName+
		"; its uncertainty adds to that of every result.")
}

var nan = math.NaN()

// Scale returns the image scale in mm per px set by MMPerPx or
// ScalePoints, or 0 when the results stay in px.
func (p Params) Scale() float64 {
	if p.MMPerPx > 0 {
		return p.MMPerPx
	}
	if s := p.ScalePoints; s != nil {
		if d := math.Hypot(s.B[0]-s.A[0], s.B[1]-s.A[1]); d > 0 {
			return s.Distance / d
		}
	}
	return 0
}

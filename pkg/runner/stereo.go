package runner

import (
	"context"
	"encoding/json"
	"fmt"
	"io"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
	"github.com/mottledic/mottle/pkg/series3d"
	"github.com/mottledic/mottle/pkg/service/jobs"
	"github.com/mottledic/mottle/pkg/stereo"
)

// Input names of a stereo job (jobs.InputKey): the rig file and the four
// images. The left images take the names of a 2D analysis' images, so the
// image and map routes of an analysis show the left camera.
const (
	StereoRig            = "rig"
	StereoLeftReference  = "reference"
	StereoRightReference = "right_reference"
	StereoLeftDeformed   = "deformed"
	StereoRightDeformed  = "right_deformed"
)

// StereoParams is the parameter document of a stereo job (jobs.Job.Params).
type StereoParams struct {
	// Params are the measurement's parameters (subset, step, strain
	// window, prefilter, depth bounds, ROI).
	Params series3d.Params `json:"params"`
	// Deformed is true when the job has a deformed pair; without one the
	// job measures the shape of the reference alone.
	Deformed bool `json:"deformed"`
	// Reference and DeformedName name the left images in the results.
	Reference    string `json:"reference,omitempty"`
	DeformedName string `json:"deformed_name,omitempty"`
}

// StereoImages are the images of one stereo state: the left and right
// reference, and the left and right deformed images or neither.
type StereoImages struct {
	LeftRef, RightRef, LeftDef, RightDef *imageio.Gray
}

// StereoField measures one stereo state with rig: the reference pair is
// matched and triangulated (the shape) and, when im has a deformed pair,
// tracked into it with the surface strain. The images and p must have been
// checked (rig.Check, p.Validate). threads caps the correlation's
// goroutines (0 = all cores); results do not depend on it. It is the one
// computation behind POST /v1/stereo.
func StereoField(ctx context.Context, rig *calib.Rig, im StereoImages, p StereoParams, threads int) (*field.Field, error) {
	l0, r0 := im.LeftRef, im.RightRef
	o, err := p.Params.Options(l0.W, l0.H)
	if err != nil {
		return nil, &FieldError{Field: "params", Detail: err.Error()}
	}
	o.Correlate.Threads = threads
	ref, err := stereo.Match(ctx, rig, l0, r0, o)
	if err != nil {
		return nil, fmt.Errorf("stereo matching: %w", err)
	}
	fr, err := stereo.SpecimenFrame(ref)
	if err != nil {
		return nil, fmt.Errorf("stereo matching: %w", err)
	}
	in := stereoInput{Ref: ref, Frame: fr, StrainWindow: p.Params.StrainWindow}
	if p.Deformed {
		if im.LeftDef == nil || im.RightDef == nil {
			return nil, fmt.Errorf("stereo tracking: the deformed pair is incomplete; give the left and the right deformed image")
		}
		st, err := ref.Track(ctx, l0, r0, im.LeftDef, im.RightDef)
		if err != nil {
			return nil, fmt.Errorf("stereo tracking: %w", err)
		}
		sf, err := stereo.Strain(ref, st, stereo.StrainOptions{Window: in.window()})
		if err != nil {
			return nil, fmt.Errorf("surface strain: %w", err)
		}
		in.State, in.Surface = st, sf
	}
	f, err := in.build(rig, p.Params)
	if err != nil {
		return nil, err
	}
	f.Meta.Reference = p.Reference
	if p.Deformed {
		f.Meta.Deformed = p.DeformedName
	}
	return f, nil
}

// stereoInput is results.StereoInput whose strain window 0 means the
// default of series3d (5 grid points).
type stereoInput results.StereoInput

func (in *stereoInput) window() int {
	if in.StrainWindow == 0 {
		in.StrainWindow = 5
	}
	return in.StrainWindow
}

// build is the one result field of a stereo state (a stereo job or a
// frame of a stereo series): results.BuildStereo with the rig's baseline
// and angle and the parameters in the metadata.
func (in *stereoInput) build(rig *calib.Rig, p series3d.Params) (*field.Field, error) {
	in.window()
	f, err := results.BuildStereo(results.StereoInput(*in), map[string]any{"rig_baseline_mm": rig.Baseline(), "rig_angle_deg": rig.Angle(), "params": p}, "mottle serve")
	if err != nil {
		return nil, fmt.Errorf("stereo results: %w", err)
	}
	return f, nil
}

// computeStereo loads the inputs of stereo job j and measures it.
func (s *Runner) computeStereo(ctx context.Context, j *jobs.Job) (*Result, error) {
	var p StereoParams
	if err := json.Unmarshal(j.Params, &p); err != nil {
		return nil, fmt.Errorf("stored stereo parameters: %w", err)
	}
	rig, err := s.loadRig(ctx, jobs.InputKey(j.ID, StereoRig))
	if err != nil {
		return nil, err
	}
	var im StereoImages
	names := []string{StereoLeftReference, StereoRightReference}
	dst := []**imageio.Gray{&im.LeftRef, &im.RightRef}
	if p.Deformed {
		names = append(names, StereoLeftDeformed, StereoRightDeformed)
		dst = append(dst, &im.LeftDef, &im.RightDef)
	}
	for k, n := range names {
		if *dst[k], err = s.LoadImage(ctx, jobs.InputKey(j.ID, n)); err != nil {
			return nil, err
		}
	}
	if err := rig.Check(im.LeftRef.W, im.LeftRef.H, im.RightRef.W, im.RightRef.H); err != nil {
		return nil, &FieldError{Field: "rig", Detail: err.Error()}
	}
	f, err := StereoField(ctx, rig, im, p, s.cfg.JobThreads)
	if err != nil {
		return nil, err
	}
	return EncodeFormats(f, j.Formats)
}

// loadRig reads and parses the stored rig file under key.
func (s *Runner) loadRig(ctx context.Context, key string) (*calib.Rig, error) {
	rc, err := s.blobs.Get(ctx, key)
	if err != nil {
		return nil, fmt.Errorf("stored rig file: %w", err)
	}
	b, err := io.ReadAll(io.LimitReader(rc, 1<<20))
	rc.Close()
	if err != nil {
		return nil, fmt.Errorf("stored rig file: %w", err)
	}
	rf, err := calib.ParseRig(b)
	if err != nil {
		return nil, &FieldError{Field: "rig", Detail: err.Error()}
	}
	return rf.Rig(), nil
}

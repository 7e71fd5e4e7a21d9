package runner

import (
	"context"
	"encoding/json"
	"fmt"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/series3d"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// A stereo series (jobs.Series.Kind jobs.Stereo) keeps its rig under
// jobs.SeriesKey(id, StereoRig) and its reference pair under
// SeriesKey(id, StereoLeftReference) and SeriesKey(id,
// StereoRightReference); each frame job keeps its pair under
// jobs.InputKey(job, StereoLeftDeformed) and InputKey(job,
// StereoRightDeformed). The series' parameter document is series3d.Params.
// Its frames run through the frame gate of a 2D series (one at a time, in
// order; they are not solved ahead) and leave the series3d state after
// them under StateKey, as a 2D frame leaves the tracker's.

// DecodeStereoSeriesParams reads a stereo series' stored parameter
// document.
func DecodeStereoSeriesParams(b []byte) (series3d.Params, error) {
	var p series3d.Params
	if err := json.Unmarshal(b, &p); err != nil {
		return p, fmt.Errorf("stored stereo series parameters: %w", err)
	}
	return p, nil
}

// computeStereoFrame adds stereo series frame j to its series sr: the
// first frame matches the reference pair (series3d.New), every later one
// continues from the state after the last frame that succeeded before it
// (series3d.Restore), so the reference pair is matched once per series.
func (s *Runner) computeStereoFrame(ctx context.Context, j *jobs.Job, sr *jobs.Series) (*Result, error) {
	p, err := DecodeStereoSeriesParams(sr.Params)
	if err != nil {
		return nil, err
	}
	p.Threads = s.cfg.JobThreads
	rig, err := s.loadRig(ctx, jobs.SeriesKey(sr.ID, StereoRig))
	if err != nil {
		return nil, err
	}
	var l0, r0, l, r *imageio.Gray
	if l0, err = s.LoadImage(ctx, jobs.SeriesKey(sr.ID, StereoLeftReference)); err != nil {
		return nil, err
	}
	if r0, err = s.LoadImage(ctx, jobs.SeriesKey(sr.ID, StereoRightReference)); err != nil {
		return nil, err
	}
	if l, err = s.LoadImageAs(ctx, jobs.InputKey(j.ID, StereoLeftDeformed), l0.Orientation); err != nil {
		return nil, err
	}
	if r, err = s.LoadImageAs(ctx, jobs.InputKey(j.ID, StereoRightDeformed), r0.Orientation); err != nil {
		return nil, err
	}
	if err := rig.Check(l.W, l.H, r.W, r.H); err != nil {
		return nil, &FieldError{Field: "right", Detail: err.Error()}
	}
	refName := sr.ReferenceName
	if refName == "" {
		refName = "reference"
	}
	last, err := s.lastDone(ctx, j)
	if err != nil {
		return nil, err
	}
	var ser *series3d.Series
	if last == nil {
		ser, err = series3d.New(ctx, rig, l0, r0, series.FrameMeta{Name: refName}, p)
	} else {
		var b []byte
		if b, err = s.ReadBlob(ctx, StateKey(sr.ID, last.FrameIndex)); err != nil {
			return nil, fmt.Errorf("stereo series state after frame %d: %w; the series cannot continue, start a new series", last.FrameIndex, err)
		}
		var st series3d.State
		if st, err = series3d.UnmarshalState(b); err == nil {
			ser, err = series3d.Restore(rig, l0, r0, p, st)
		}
		if err == nil && ser.NeedsPrevious() {
			// Incremental tracking goes on from the last pair's images.
			var lp, rp *imageio.Gray
			if lp, err = s.LoadImageAs(ctx, jobs.InputKey(last.ID, StereoLeftDeformed), l0.Orientation); err == nil {
				if rp, err = s.LoadImageAs(ctx, jobs.InputKey(last.ID, StereoRightDeformed), r0.Orientation); err == nil {
					ser.SetPrevious(lp, rp)
				}
			}
		}
	}
	if err != nil {
		return nil, err
	}
	name := j.Name
	if name == "" {
		name = fmt.Sprintf("frame_%d", j.FrameIndex)
	}
	fr, row, err := ser.Add(ctx, l, r, series.FrameMeta{Name: name, Time: j.Time, Load: j.Load})
	if err != nil {
		return nil, err
	}
	in := stereoInput{Ref: ser.Reference(), Frame: ser.SpecimenFrame(), State: fr.State, Surface: fr.Surface, StrainWindow: p.StrainWindow}
	f, err := in.build(rig, p)
	if err != nil {
		return nil, err
	}
	f.Meta.Reference, f.Meta.Deformed = refName, name
	res, err := EncodeFormats(f, j.Formats)
	if err != nil {
		return nil, err
	}
	if res.State, err = ser.MarshalState(); err != nil {
		return nil, err
	}
	res.Summary = frameSummary(res.Summary, row)
	if last != nil {
		res.stateFrom = StateKey(sr.ID, last.FrameIndex)
	}
	return res, nil
}

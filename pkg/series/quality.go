package series

import (
	"fmt"
	"slices"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
	"github.com/mottledic/mottle/pkg/roi"
)

// FrameQuality is the image quality of one frame of a series (package
// quality). A frame is Flagged when its quality dropped against the
// reference: a problem appeared that the reference did not have
// (saturation, clipping, blur, …), the contrast fell or the blur rose by
// more than the thresholds, or the brightness changed. For the reference
// row, Flagged says that the reference itself has problems.
type FrameQuality struct {
	Flagged bool `json:"flagged"`
	// Change is the frame's change against the reference (zero for the
	// reference row).
	Change quality.Change `json:"change"`
	// Warnings are what flagged the frame, each with what to change at the
	// bench.
	Warnings []quality.Warning `json:"warnings,omitempty"`
}

// qualityMask returns the series ROI (Params.Analysis.ROI and the mask
// image) as a mask of the reference, nil for the whole image.
func (t *Tracker) qualityMask() (*roi.Mask, error) {
	if t.st.Params.Analysis.ROI == nil && t.st.Mask == nil {
		return nil, nil
	}
	var mi *imageio.Gray
	if t.st.Mask != nil {
		var err error
		if mi, err = t.st.Mask.image(t.ref.W, t.ref.H); err != nil {
			return nil, err
		}
	}
	p := t.st.Params.Analysis
	opt, err := analysis.CorrelationOptions(p, t.ref.W, t.ref.H, mi)
	if err != nil {
		return nil, err
	}
	return opt.Mask, nil
}

// frameQuality assesses img against the reference over the series ROI,
// measuring the reference first if that has not been done (the result is
// kept in the state, and the reference row of the curve gets its own
// quality). The reference ROI is used for every frame: material that moves
// out of it is not followed, which is close enough for these image-wide
// measures.
func (t *Tracker) frameQuality(img *imageio.Gray, label string) (*FrameQuality, error) {
	mask, err := t.qualityMask()
	if err != nil {
		return nil, fmt.Errorf("image quality: %w", err)
	}
	th := quality.Thresholds{}
	if t.st.RefQuality == nil {
		r, err := quality.Assess(t.ref, mask, "reference", nil, th)
		if err != nil {
			return nil, err
		}
		t.st.RefQuality = &r
		if len(t.st.Curve) > 0 {
			t.st.Curve[0].Quality = &FrameQuality{Flagged: len(r.Warnings) > 0, Warnings: r.Warnings}
		}
	}
	ref := t.st.RefQuality
	r, err := quality.Assess(img, mask, label, &ref.Measures, th)
	if err != nil {
		return nil, err
	}
	had := map[string]bool{}
	for _, w := range ref.Warnings {
		had[w.Code] = true
	}
	fq := &FrameQuality{Change: *r.Change}
	for _, w := range r.Warnings {
		// A problem the reference already has is reported once, on the
		// reference row, not on every frame.
		if !had[w.Code] || slices.Contains([]string{quality.BrightnessChange, quality.ContrastDrop, quality.BlurRise}, w.Code) {
			fq.Warnings = append(fq.Warnings, w)
		}
	}
	fq.Flagged = len(fq.Warnings) > 0
	return fq, nil
}

// Flagged returns the indices of the curve rows whose image quality is
// flagged (see FrameQuality).
func (c Curve) Flagged() []int {
	var out []int
	for _, r := range c.Rows {
		if r.Quality != nil && r.Quality.Flagged {
			out = append(out, r.Index)
		}
	}
	return out
}

package quality

import (
	"context"
	"errors"
	"fmt"
	"math"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
)

// AssessPair assesses a reference and a deformed image over mask (nil =
// whole image): the reference on its own, the deformed image on its own and
// against the reference. Errors are those of Measure, naming the image.
//
// The two images are measured side by side (the deformed image in a second
// goroutine); the reports are the same as from Assess on each in turn.
func AssessPair(ref, def *imageio.Gray, mask *roi.Mask, t Thresholds) ([]Report, error) {
	rs, _, err := AssessPairWith(ref, nil, def, mask, t)
	return rs, err
}

// AssessPairWith is AssessPair that can reuse the reference's measures:
// refM, if not nil, must be what Measure(ref, mask) gave (for instance in
// an earlier analysis of the same reference and ROI), and then only the
// deformed image is measured. It also returns the reference's measures as
// Measure gives them (before Report cleans them), for the next analysis
// of that reference. The reports are AssessPair's in either case.
func AssessPairWith(ref *imageio.Gray, refM *Measures, def *imageio.Gray, mask *roi.Mask, t Thresholds) ([]Report, Measures, error) {
	var dm Measures
	var derr error
	done := make(chan struct{})
	go func() {
		defer close(done)
		dm, derr = Measure(def, mask)
	}()
	var rm Measures
	var err error
	if refM != nil {
		rm = *refM
	} else if rm, err = Measure(ref, mask); err != nil {
		err = fmt.Errorf("reference image: %w", err)
	}
	<-done
	if err != nil {
		return nil, Measures{}, err
	}
	if derr != nil {
		return nil, Measures{}, fmt.Errorf("deformed image: %w", derr)
	}
	r := report(rm, "reference", nil, t)
	// The report's measures are cleaned (NaN → 0); Compare treats a zero
	// reference value as "no change", as it treats NaN.
	return []Report{r, report(dm, "deformed", &r.Measures, t)}, rm, nil
}

// Warnings returns the warnings of all reports, in order; an empty (not
// nil) slice when there are none.
func Warnings(rs []Report) []Warning {
	ws := []Warning{}
	for _, r := range rs {
		ws = append(ws, r.Warnings...)
	}
	return ws
}

// Recommendation is the subset advice for one image: the automatic subset
// for a target uncertainty, what it predicts and the spatial resolution it
// gives.
type Recommendation struct {
	// TargetStd is the displacement standard deviation aimed at, px, and
	// Fraction the share of points that must meet it.
	TargetStd float64 `json:"target_std_px"`
	Fraction  float64 `json:"fraction"`
	// Noise is the noise σ used, grey levels, and NoiseSource where it came
	// from: "given" or "image" (NoiseFromImage, a rougher estimate than a
	// static pair).
	Noise       float64 `json:"noise_sigma"`
	NoiseSource string  `json:"noise_source"`
	// SubsetPx is the recommended subset, 0 when the target cannot be met
	// with a subset up to MaxSubsetPx; then Problem says what would work.
	SubsetPx    int    `json:"subset_px"`
	MaxSubsetPx int    `json:"max_subset_px"`
	Problem     string `json:"problem,omitempty"`
	// PredictedStdPx is the predicted displacement std reached by Fraction
	// of the points with SubsetPx, MedianStdPx its median.
	PredictedStdPx float64 `json:"predicted_std_px"`
	MedianStdPx    float64 `json:"median_std_px"`
	// StepPx is the step the spatial resolution is given for (a third of
	// the subset unless one was asked for; common practice), StrainWindow
	// the strain window in points, and VSGPx the virtual strain gauge
	// (StrainWindow − 1)·StepPx + SubsetPx.
	StepPx       int `json:"step_px"`
	StrainWindow int `json:"strain_window"`
	VSGPx        int `json:"vsg_px"`
}

// MaxRecommendWindow is the side of the centred window that Recommend
// analyses in larger images, to bound its time and memory (about 32 bytes
// per analysed pixel).
const MaxRecommendWindow = 1024

// Recommend chooses the subset for g (the reference image) to meet target
// px at fraction of the points (0 = DefaultFraction), with the noise σ
// given or, when noise is 0, estimated from g alone. step (0 = a third of
// the chosen subset) and window give the virtual strain gauge. An
// unreachable target is not an error: the Recommendation says so in
// Problem. Images larger than MaxRecommendWindow in either direction are
// analysed in a centred window of that size, and then mask must be nil.
// Errors: invalid inputs, an image too small or flat, ctx cancelled.
func Recommend(ctx context.Context, g *imageio.Gray, mask *roi.Mask, target, noise, fraction float64, step, window int) (*Recommendation, error) {
	if g != nil && (g.W > MaxRecommendWindow || g.H > MaxRecommendWindow) {
		if mask != nil {
			return nil, fmt.Errorf("automatic subset: a %d×%d px image with an ROI: use ChooseSubset", g.W, g.H)
		}
		w, h := min(g.W, MaxRecommendWindow), min(g.H, MaxRecommendWindow)
		g = g.Sub((g.W-w)/2, (g.H-h)/2, w, h)
	}
	if g == nil || g.W*g.H == 0 {
		return nil, fmt.Errorf("%w: automatic subset: the image is empty", ErrEmpty)
	}
	if fraction == 0 {
		fraction = DefaultFraction
	}
	if window < 1 || window%2 == 0 {
		return nil, fmt.Errorf("automatic subset: strain window %d points: want an odd number ≥ 1 (5 is typical)", window)
	}
	r := &Recommendation{TargetStd: target, Fraction: fraction, Noise: noise, NoiseSource: "given",
		MaxSubsetPx: DefaultMaxSub, StrainWindow: window}
	if noise == 0 {
		s, err := NoiseFromImage(g, mask)
		if err != nil {
			return nil, fmt.Errorf("automatic subset: %w", err)
		}
		if !(s > 0) {
			return nil, fmt.Errorf("automatic subset: the image shows no noise (σ = %g); give the noise σ of the camera, e.g. from a static pair", s)
		}
		r.Noise, r.NoiseSource = s, "image"
	}
	c, err := ChooseSubset(ctx, g, SubsetOptions{Target: target, Noise: r.Noise, Fraction: fraction, Mask: mask,
		Max: min(DefaultMaxSub, oddBelow(min(g.W, g.H)))})
	switch {
	case errors.Is(err, ErrUnreachable):
		r.Problem = err.Error()
		r.MaxSubsetPx = c.Sizes[len(c.Sizes)-1]
		return r, nil
	case err != nil:
		return nil, err
	}
	r.MaxSubsetPx = c.Sizes[len(c.Sizes)-1]
	r.SubsetPx, r.PredictedStdPx, r.MedianStdPx = c.Subset, c.Predicted, c.Median
	r.StepPx = step
	if step <= 0 {
		r.StepPx = max(1, int(math.Round(float64(c.Subset)/3)))
	}
	r.VSGPx = VSG(r.SubsetPx, r.StepPx, window)
	return r, nil
}

// oddBelow returns the largest odd number ≤ n, at least DefaultMinSub.
func oddBelow(n int) int {
	if n%2 == 0 {
		n--
	}
	return max(n, DefaultMinSub)
}

package quality

import (
	"context"
	"errors"
	"fmt"
	"math"
	"slices"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
	"github.com/mottledic/mottle/pkg/spline"
)

// Defaults and limits of SubsetOptions.
const (
	DefaultFraction = 0.95
	DefaultMinSub   = 7
	DefaultMaxSub   = 101
	MaxSub          = 401
	DefaultGridStep = 8
)

// ErrUnreachable is returned (wrapped) when no subset up to the largest
// allowed meets the target.
var ErrUnreachable = errors.New("quality: target uncertainty not reachable")

// SubsetOptions are the inputs of ChooseSubset. The zero value of a field
// means its default, except Target and Noise.
type SubsetOptions struct {
	// Target is the displacement standard deviation to meet, px. Required.
	Target float64 `json:"target_std_px"`
	// Noise is the image noise σ in grey levels, assumed equal in both
	// images (NoiseFromPair from a static pair, or NoiseFromImage).
	// Required.
	Noise float64 `json:"noise_sigma"`
	// Fraction is the share of grid points at which the chosen subset must
	// meet the target. Default 0.95.
	Fraction float64 `json:"fraction"`
	// Min and Max bound the odd subset sides tried, px. Defaults 7 and 101;
	// Max at most 401.
	Min int `json:"min_subset_px"`
	Max int `json:"max_subset_px"`
	// Step is the spacing of the grid of points evaluated, px. Default 8.
	Step int `json:"step_px"`
	// Mask is the region of interest: a point counts for a subset only when
	// the whole subset is inside. nil = the whole image.
	Mask *roi.Mask `json:"-"`
}

func (o SubsetOptions) withDefaults() SubsetOptions {
	if o.Fraction == 0 {
		o.Fraction = DefaultFraction
	}
	if o.Min == 0 {
		o.Min = DefaultMinSub
	}
	if o.Max == 0 {
		o.Max = DefaultMaxSub
	}
	if o.Step == 0 {
		o.Step = DefaultGridStep
	}
	return o
}

// Validate reports every problem of o (after defaults) at once.
func (o SubsetOptions) Validate() error {
	o = o.withDefaults()
	var errs []error
	if !(o.Target > 0) || math.IsInf(o.Target, 0) {
		errs = append(errs, fmt.Errorf("target std %v px: want a positive displacement standard deviation, e.g. 0.01", o.Target))
	}
	if !(o.Noise > 0) || math.IsInf(o.Noise, 0) {
		errs = append(errs, fmt.Errorf("noise σ %v: want a positive number of grey levels (from a static pair or estimated from the image)", o.Noise))
	}
	if !(o.Fraction > 0 && o.Fraction <= 1) {
		errs = append(errs, fmt.Errorf("fraction %v: want a share of points in (0, 1], e.g. 0.95", o.Fraction))
	}
	if o.Min < 3 || o.Min%2 == 0 || o.Max%2 == 0 || o.Max < o.Min || o.Max > MaxSub {
		errs = append(errs, fmt.Errorf("subset range %d–%d px: want odd sides with 3 ≤ min ≤ max ≤ %d", o.Min, o.Max, MaxSub))
	}
	if o.Step < 1 || o.Step > 1000 {
		errs = append(errs, fmt.Errorf("grid step %d px: want 1 to 1000", o.Step))
	}
	return errors.Join(errs...)
}

// SubsetChoice is the answer of ChooseSubset.
type SubsetChoice struct {
	// Subset is the chosen odd subset side in px: the smallest whose
	// predicted σ = max(σ_u, σ_v) is at most Target at Fraction of the
	// points where it fits; 0 if none up to Max does.
	Subset int `json:"subset_px"`
	// Target, Noise and Fraction are the inputs.
	Target   float64 `json:"target_std_px"`
	Noise    float64 `json:"noise_sigma"`
	Fraction float64 `json:"fraction"`
	// Predicted is the predicted σ at Subset reached by Fraction of the
	// points (the value compared with Target), Median its median, px.
	Predicted float64 `json:"predicted_std_px"`
	Median    float64 `json:"median_std_px"`
	// Met is the share of the points at which Subset meets the target.
	Met float64 `json:"met_fraction"`
	// Sizes are the subsets tried, and Quantile the predicted σ reached by
	// Fraction of the points for each (0 where no point fits, −1 where
	// the pattern there is flat: no gradient at all).
	Sizes    []int     `json:"sizes_px"`
	Quantile []float64 `json:"quantile_std_px"`
	// X0, Y0, Step, Nx and Ny define the grid of points: point (i, j) is at
	// (X0 + i·Step, Y0 + j·Step), stored row-major.
	X0   int `json:"x0"`
	Y0   int `json:"y0"`
	Step int `json:"step_px"`
	Nx   int `json:"nx"`
	Ny   int `json:"ny"`
	// Required is, per grid point, the smallest subset that meets the
	// target there; 0 where even Max does not, −1 where not even Min fits
	// in the image and ROI.
	Required []int `json:"required_subset_px"`
}

// Predict returns the predicted standard deviations of u and v, px, for a
// subset whose sums of squared intensity gradients (see Gradients) are sxx and syy, with
// noise σ in both images: √2·σ/√Σ (Wang, Li, Tong & Ruan 2007). The sums
// are taken over the recorded (noisy) reference, as in Pan et al. 2008; a
// sum of 0 gives +Inf.
func Predict(sxx, syy, sigma float64) (su, sv float64) {
	one := func(g2 float64) float64 {
		if !(g2 > 0) {
			return math.Inf(1)
		}
		return math.Sqrt2 * sigma / math.Sqrt(g2)
	}
	return one(sxx), one(syy)
}

// Gradients returns the x and y intensity gradients of g at the pixel
// centres, grey levels per px, row-major with stride g.W: the derivatives
// of its cubic B-spline interpolant (package spline), the same gradients
// the IC-GN Hessian of package correlate is built from.
func Gradients(ctx context.Context, g *imageio.Gray) (gx, gy []float32, err error) {
	s, err := spline.NewContext(ctx, g, spline.Cubic, 0)
	if err != nil {
		return nil, nil, err
	}
	return s.SampleGradients(ctx, 0)
}

// sat is a summed-area table of a w×h image, (w+1)×(h+1).
type sat struct {
	w int
	s []float64
}

// newSAT returns the table of v², for a w×h image v.
func newSAT(v []float32, w, h int) sat {
	t := sat{w: w + 1, s: make([]float64, (w+1)*(h+1))}
	for y := 0; y < h; y++ {
		var row float64
		for x := 0; x < w; x++ {
			f := float64(v[y*w+x])
			row += f * f
			t.s[(y+1)*t.w+x+1] = t.s[y*t.w+x+1] + row
		}
	}
	return t
}

// sum returns the sum over x0 ≤ x ≤ x1, y0 ≤ y ≤ y1.
func (t sat) sum(x0, y0, x1, y1 int) float64 {
	return t.s[(y1+1)*t.w+x1+1] - t.s[y0*t.w+x1+1] - t.s[(y1+1)*t.w+x0] + t.s[y0*t.w+x0]
}

// ChooseSubset chooses the subset for a target displacement uncertainty
// from the reference image ref, by the sum of squared subset intensity
// gradients (Pan, Xie, Wang, Qian & Wang 2008, Opt. Express 16:7037) and
// the noise formula of Wang et al. 2007 (see Predict): on a grid of points
// it finds, for each odd subset from o.Min to o.Max, the predicted σ
// reached by o.Fraction of the points where the subset fits, and returns
// the smallest subset for which that is at most o.Target, together with
// the subset each point needs.
//
// When no subset up to o.Max meets the target the choice is returned with
// Subset 0 and an error wrapping ErrUnreachable that says what would work.
// Other errors: invalid options, an empty image, a mask of another size,
// or ctx cancelled.
func ChooseSubset(ctx context.Context, ref *imageio.Gray, o SubsetOptions) (*SubsetChoice, error) {
	if err := o.Validate(); err != nil {
		return nil, fmt.Errorf("automatic subset: %w", err)
	}
	o = o.withDefaults()
	if ref == nil || ref.W*ref.H == 0 {
		return nil, fmt.Errorf("%w: automatic subset: the reference image is empty", ErrEmpty)
	}
	if o.Mask != nil && (o.Mask.W != ref.W || o.Mask.H != ref.H) {
		return nil, fmt.Errorf("automatic subset: ROI mask is %d×%d px but the image is %d×%d px", o.Mask.W, o.Mask.H, ref.W, ref.H)
	}
	r0 := o.Min / 2
	if ref.W < o.Min || ref.H < o.Min {
		return nil, fmt.Errorf("%w: automatic subset: the %d×%d px image is smaller than the smallest subset, %d px", ErrEmpty, ref.W, ref.H, o.Min)
	}
	c := &SubsetChoice{Target: o.Target, Noise: o.Noise, Fraction: o.Fraction, X0: r0, Y0: r0, Step: o.Step,
		Nx: (ref.W-1-2*r0)/o.Step + 1, Ny: (ref.H-1-2*r0)/o.Step + 1}
	// Only the ROI's bounding box (and a margin, so the spline sees the
	// real neighbours of its edge pixels) is needed.
	ox, oy, ex, ey := 0, 0, ref.W, ref.H
	if o.Mask != nil {
		const margin = 4
		bx0, by0, bx1, by1 := o.Mask.Bounds()
		ox, oy = max(0, bx0-margin), max(0, by0-margin)
		ex, ey = min(ref.W, bx1+margin), min(ref.H, by1+margin)
		if ex <= ox || ey <= oy {
			return nil, fmt.Errorf("%w: automatic subset: the ROI is empty", ErrEmpty)
		}
	}
	crop := ref.Sub(ox, oy, ex-ox, ey-oy)
	gx, gy, err := Gradients(ctx, crop)
	if err != nil {
		return nil, fmt.Errorf("automatic subset: gradients of the reference image: %w", err)
	}
	tx, ty := newSAT(gx, crop.W, crop.H), newSAT(gy, crop.W, crop.H)
	n := c.Nx * c.Ny
	c.Required = make([]int, n)
	for i := range c.Required {
		c.Required[i] = -1
	}
	pred := make([]float64, 0, n)
	for s := o.Min; s <= o.Max; s += 2 {
		if err := ctx.Err(); err != nil {
			return nil, fmt.Errorf("automatic subset: %w", err)
		}
		r := s / 2
		pred = pred[:0]
		for j := 0; j < c.Ny; j++ {
			for i := 0; i < c.Nx; i++ {
				x, y := c.X0+i*c.Step, c.Y0+j*c.Step
				x0, y0, x1, y1 := x-r, y-r, x+r, y+r
				if x0 < 0 || y0 < 0 || x1 >= ref.W || y1 >= ref.H || (o.Mask != nil && !o.Mask.RectInside(x0, y0, x1, y1)) {
					continue
				}
				if x0 < ox || y0 < oy || x1 >= ex || y1 >= ey {
					continue
				}
				su, sv := Predict(tx.sum(x0-ox, y0-oy, x1-ox, y1-oy), ty.sum(x0-ox, y0-oy, x1-ox, y1-oy), o.Noise)
				p := math.Max(su, sv)
				pred = append(pred, p)
				k := j*c.Nx + i
				if c.Required[k] == -1 {
					c.Required[k] = 0
				}
				if c.Required[k] == 0 && p <= o.Target {
					c.Required[k] = s
				}
			}
		}
		c.Sizes = append(c.Sizes, s)
		if len(pred) == 0 {
			c.Quantile = append(c.Quantile, 0)
			continue
		}
		slices.Sort(pred)
		q := pred[max(0, int(math.Ceil(o.Fraction*float64(len(pred))))-1)]
		if math.IsInf(q, 1) {
			c.Quantile = append(c.Quantile, -1)
		} else {
			c.Quantile = append(c.Quantile, q)
		}
		if c.Subset == 0 && q <= o.Target {
			c.Subset = s
			c.Predicted, c.Median = q, pred[(len(pred)-1)/2]
			met, _ := slices.BinarySearch(pred, math.Nextafter(o.Target, math.Inf(1)))
			c.Met = float64(met) / float64(len(pred))
		}
	}
	if c.Subset == 0 {
		best := 0.0
		for i := len(c.Quantile) - 1; i >= 0 && best == 0; i-- {
			best = c.Quantile[i]
		}
		if best == -1 {
			return c, fmt.Errorf("%w: at %.0f %% of the points even a %d px subset holds no intensity gradient; the image shows no pattern there",
				ErrUnreachable, 100*o.Fraction, o.Max)
		}
		if best == 0 {
			return c, fmt.Errorf("%w: no subset from %d to %d px fits inside the image and ROI", ErrUnreachable, o.Min, o.Max)
		}
		return c, fmt.Errorf("%w: %.2g px at %.0f %% of the points needs a subset above %d px (there the prediction is %.2g px); "+
			"accept a larger target or subset, lower the noise (more light, averaging) or improve the pattern contrast",
			ErrUnreachable, o.Target, 100*o.Fraction, o.Max, best)
	}
	return c, nil
}

// VSG returns the virtual strain gauge size in px of a strain computed
// over a window of window grid points at spacing step with subsets of side
// subset: (window − 1)·step + subset (iDICs Good Practices Guide 2018,
// from memory).
func VSG(subset, step, window int) int { return (window-1)*step + subset }

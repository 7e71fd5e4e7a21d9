package verify

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sort"

	"github.com/mottledic/mottle/pkg/imageio"
)

// Tracker measures the displacement at integer subset centres pts of ref
// in def with square subsets of side subset. It returns one Disp per point.
type Tracker func(ctx context.Context, ref, def *imageio.Gray, pts [][2]int, subset int) ([]Disp, error)

// StarSet is one set of DIC Challenge 2.0 star images (Reu et al. 2022,
// Exp. Mech. 62:639): a static pair for the noise and a star pair whose
// vertical displacement is v = A·cos(2π(y − Y0)/p(x)), u = 0, with the
// period p growing along x (form from memory, see REFERENCES.md).
type StarSet struct {
	StaticRef, StaticDef *imageio.Gray // same state, independent noise
	Ref, Def             *imageio.Gray // reference and star-deformed image
	Amplitude            float64       // A, px
	Y0                   int           // row of a crest, where v = +A
	// Period returns the local period p(x) in px at reference column x.
	Period func(x float64) float64
	// Sign is +1 if v = +A on row Y0 and −1 if the row is a trough.
	// 0 means +1.
	Sign float64
}

// ChallengeOptions set up the protocol. Zero fields take the defaults given.
type ChallengeOptions struct {
	// Subsets are the subset sides to evaluate. Default 11, 21, 31, 41, 51.
	Subsets []int
	// Step is the spacing in px of the points along the crest row and of
	// the noise grid. Default 2 along the row, 8 for the noise grid.
	Step, NoiseStep int
	// Smooth is the width, in points, of the running median and then the
	// moving average applied to the measured amplitude along the row before
	// the crossing is located, and the number of consecutive points that
	// must stay below Level for a crossing to count (odd; default 9). It
	// damps noise and outliers without moving a crossing much on a slowly
	// varying attenuation curve.
	Smooth int
	// Level is the attenuation that defines the spatial resolution: the
	// period where the measured amplitude is Level·A. Default 0.9 (10 %).
	Level float64
	// ImageNoise is the standard deviation of the image noise in grey
	// levels, if known; it enables the predicted noise column. 0 = unknown.
	ImageNoise float64
	// Order is the shape-function order the tracker uses (1 or 2), for the
	// theoretical period column. Default 1.
	Order int
}

func (o ChallengeOptions) withDefaults() ChallengeOptions {
	if len(o.Subsets) == 0 {
		o.Subsets = []int{11, 21, 31, 41, 51}
	}
	if o.Step == 0 {
		o.Step = 2
	}
	if o.NoiseStep == 0 {
		o.NoiseStep = 8
	}
	if o.Smooth == 0 {
		o.Smooth = 9
	}
	if o.Level == 0 {
		o.Level = 0.9
	}
	if o.Order == 0 {
		o.Order = 1
	}
	return o
}

// Validate returns every problem with o (after defaults) at once.
func (o ChallengeOptions) Validate() error {
	o = o.withDefaults()
	var errs []error
	for _, n := range o.Subsets {
		if n < 5 || n%2 == 0 {
			errs = append(errs, fmt.Errorf("subset %d: must be odd and ≥ 5", n))
		}
	}
	if o.Step < 1 || o.NoiseStep < 1 {
		errs = append(errs, fmt.Errorf("step %d / noise step %d: must be ≥ 1", o.Step, o.NoiseStep))
	}
	if o.Smooth < 1 || o.Smooth%2 == 0 {
		errs = append(errs, fmt.Errorf("smooth %d: must be odd and ≥ 1", o.Smooth))
	}
	if !(o.Level > 0 && o.Level < 1) {
		errs = append(errs, fmt.Errorf("level %v: must be in (0, 1), e.g. 0.9", o.Level))
	}
	if o.ImageNoise < 0 || math.IsNaN(o.ImageNoise) {
		errs = append(errs, fmt.Errorf("image noise %v: must be ≥ 0", o.ImageNoise))
	}
	if o.Order != 1 && o.Order != 2 {
		errs = append(errs, fmt.Errorf("order %d: must be 1 or 2", o.Order))
	}
	return errors.Join(errs...)
}

// SubsetResult is the protocol's outcome for one subset size.
type SubsetResult struct {
	Subset int
	// NoiseU, NoiseV are the standard deviations of u and v over the noise
	// grid of the static pair, px.
	NoiseU, NoiseV float64
	// PredictedNoise is the noise of v predicted from the image gradients,
	// σ_v ≈ √2·σ/√(Σ g_y²) (Wang, Li, Tong & Ruan 2007, Exp. Mech. 47:701),
	// as the RMS over the noise grid; 0 if ChallengeOptions.ImageNoise is 0.
	PredictedNoise float64
	// Resolution is the measured spatial resolution: the period p(x), px,
	// at which the smoothed amplitude along the crest first falls to
	// Level·A, scanning from long periods to short ones. NaN if not found.
	Resolution float64
	// Theory is TheoryPeriod(Subset, Order, Level).
	Theory float64
	// MEI is the metrological efficiency indicator σ_v × Resolution, px².
	MEI float64
	// Valid and Points count the measured points along the crest row.
	Valid, Points int
	// Periods and Amplitudes are the crest-row profile: p(x) and the
	// smoothed v/A at each valid point, in increasing x.
	Periods, Amplitudes []float64
	// Note explains a missing resolution.
	Note string
}

// Challenge runs the DIC Challenge 2.0 noise / spatial-resolution protocol
// (Reu et al. 2022, Exp. Mech. 62:639; details from memory) with track on
// set, for every subset in opts:
//
//  1. noise: track the static pair on a grid; σ_u, σ_v are the sample
//     standard deviations of u and v;
//  2. resolution: track the star pair along the crest row y = Y0; the
//     measured amplitude v/A, smoothed along x (running median, then
//     moving average), is scanned from the longest period towards the
//     shortest, and the period where it first drops below Level (0.9) and
//     stays below is located by linear interpolation;
//  3. metrological efficiency indicator MEI = σ_v × resolution (px²): the
//     product of displacement noise and spatial resolution, lower is better.
//     This definition is from memory of Reu et al. 2022 and of Grédiac,
//     Blaysat & Sur 2017 (Exp. Mech. 57:871), who call the product of
//     displacement resolution and spatial resolution the metrological
//     efficiency of a method; some authors divide it by the image noise σ,
//     which changes no ranking when σ is the same.
//
// A subset for which a step fails has its fields NaN and a Note; an error is
// returned only for bad options or images, or if track itself fails.
func Challenge(ctx context.Context, set StarSet, track Tracker, opts ChallengeOptions) ([]SubsetResult, error) {
	if err := opts.Validate(); err != nil {
		return nil, fmt.Errorf("challenge options: %w", err)
	}
	opts = opts.withDefaults()
	if set.StaticRef == nil || set.StaticDef == nil || set.Ref == nil || set.Def == nil || set.Period == nil {
		return nil, errors.New("challenge: star set needs StaticRef, StaticDef, Ref, Def and Period")
	}
	if !(set.Amplitude > 0) {
		return nil, fmt.Errorf("challenge: amplitude %v must be positive", set.Amplitude)
	}
	sign := set.Sign
	if sign == 0 {
		sign = 1
	}
	var out []SubsetResult
	for _, n := range opts.Subsets {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		r := SubsetResult{Subset: n, Resolution: math.NaN(), MEI: math.NaN()}
		th, err := TheoryPeriod(n, opts.Order, opts.Level)
		if err != nil {
			return nil, err
		}
		r.Theory = th
		h := n / 2

		// 1. Noise from the static pair.
		grid := gridPoints(set.StaticRef.W, set.StaticRef.H, h+2, opts.NoiseStep)
		if len(grid) < 2 {
			return nil, fmt.Errorf("challenge: static image %d×%d too small for subset %d", set.StaticRef.W, set.StaticRef.H, n)
		}
		d, err := track(ctx, set.StaticRef, set.StaticDef, grid, n)
		if err != nil {
			return nil, fmt.Errorf("challenge: subset %d, static pair: %w", n, err)
		}
		r.NoiseU, r.NoiseV = stdDisp(d)
		if opts.ImageNoise > 0 {
			r.PredictedNoise = PredictNoise(set.StaticRef, grid, n, opts.ImageNoise)
		}

		// 2. Spatial resolution along the crest row.
		if set.Y0-h-2 < 0 || set.Y0+h+2 >= set.Ref.H {
			return nil, fmt.Errorf("challenge: crest row %d too close to the edge of a %d px high image for subset %d", set.Y0, set.Ref.H, n)
		}
		var row [][2]int
		for x := h + 2; x < set.Ref.W-h-2; x += opts.Step {
			row = append(row, [2]int{x, set.Y0})
		}
		d, err = track(ctx, set.Ref, set.Def, row, n)
		if err != nil {
			return nil, fmt.Errorf("challenge: subset %d, star pair: %w", n, err)
		}
		r.Points = len(row)
		var ps, as []float64
		for i, q := range d {
			if q.OK && !math.IsNaN(q.V) {
				ps = append(ps, set.Period(float64(row[i][0])))
				as = append(as, sign*q.V/set.Amplitude)
			}
		}
		r.Valid = len(ps)
		as = movingAverage(movingMedian(as, opts.Smooth), opts.Smooth)
		r.Periods, r.Amplitudes = ps, as
		res, note := crossing(ps, as, opts.Level, opts.Smooth)
		r.Resolution, r.Note = res, note
		r.MEI = r.NoiseV * r.Resolution
		out = append(out, r)
	}
	return out, nil
}

// gridPoints returns a regular grid with the given step over a w×h image,
// keeping margin px from every edge.
func gridPoints(w, h, margin, step int) [][2]int {
	var pts [][2]int
	for y := margin; y < h-margin; y += step {
		for x := margin; x < w-margin; x += step {
			pts = append(pts, [2]int{x, y})
		}
	}
	return pts
}

// stdDisp returns the sample standard deviations of u and v over OK points.
func stdDisp(d []Disp) (su, sv float64) {
	var n int
	var mu, mv float64
	for _, p := range d {
		if p.OK {
			n++
			mu += p.U
			mv += p.V
		}
	}
	if n < 2 {
		return math.NaN(), math.NaN()
	}
	mu /= float64(n)
	mv /= float64(n)
	for _, p := range d {
		if p.OK {
			su += (p.U - mu) * (p.U - mu)
			sv += (p.V - mv) * (p.V - mv)
		}
	}
	return math.Sqrt(su / float64(n-1)), math.Sqrt(sv / float64(n-1))
}

// PredictNoise returns the RMS over pts of the predicted standard deviation
// of v for subsets of side n when both images carry Gaussian noise σ:
// σ_v ≈ √2·σ/√(Σ g_y²) (Wang, Li, Tong & Ruan 2007, "Statistical analysis of
// the effect of intensity pattern noise on the displacement measurement
// precision of digital image correlation using self-correlated images",
// Exp. Mech. 47:701). g_y is the central difference of ref; because ref is
// itself noisy, the expected noise contribution σ²/2 of a central difference
// is removed from each g_y² (common practice for an unbiased gradient energy).
func PredictNoise(ref *imageio.Gray, pts [][2]int, n int, sigma float64) float64 {
	h := n / 2
	var sum float64
	var cnt int
	for _, p := range pts {
		var e float64
		for y := p[1] - h; y <= p[1]+h; y++ {
			if y < 1 || y >= ref.H-1 {
				continue
			}
			for x := p[0] - h; x <= p[0]+h; x++ {
				if x < 0 || x >= ref.W {
					continue
				}
				g := 0.5 * float64(ref.At(x, y+1)-ref.At(x, y-1))
				e += g*g - sigma*sigma/2
			}
		}
		if e > 0 {
			s := math.Sqrt2 * sigma / math.Sqrt(e)
			sum += s * s
			cnt++
		}
	}
	if cnt == 0 {
		return math.NaN()
	}
	return math.Sqrt(sum / float64(cnt))
}

// movingMedian returns the centred running median of a over w points,
// shrinking the window at the ends.
func movingMedian(a []float64, w int) []float64 {
	out := make([]float64, len(a))
	h := w / 2
	buf := make([]float64, 0, w)
	for i := range a {
		lo, hi := max(0, i-h), min(len(a)-1, i+h)
		buf = append(buf[:0], a[lo:hi+1]...)
		sort.Float64s(buf)
		n := len(buf)
		if n%2 == 1 {
			out[i] = buf[n/2]
		} else {
			out[i] = (buf[n/2-1] + buf[n/2]) / 2
		}
	}
	return out
}

// movingAverage returns the centred moving average of a over w points,
// shrinking the window at the ends.
func movingAverage(a []float64, w int) []float64 {
	out := make([]float64, len(a))
	h := w / 2
	for i := range a {
		lo, hi := max(0, i-h), min(len(a)-1, i+h)
		var s float64
		for j := lo; j <= hi; j++ {
			s += a[j]
		}
		out[i] = s / float64(hi-lo+1)
	}
	return out
}

// crossing scans the profile (p, a) in order of decreasing p and returns
// the period where a first falls below level and stays below it for hold
// consecutive points (so an isolated noisy dip is not taken for the
// attenuation), interpolated linearly between the last point above and the
// first below. The note says why it is NaN.
func crossing(p, a []float64, level float64, hold int) (float64, string) {
	if len(p) < 2 {
		return math.NaN(), "fewer than 2 valid points on the crest row"
	}
	idx := make([]int, len(p))
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(i, j int) bool { return p[idx[i]] > p[idx[j]] })
	if a[idx[0]] < level {
		return math.NaN(), fmt.Sprintf("already attenuated below %.2f at the longest period %.1f px", level, p[idx[0]])
	}
	for k := 1; k < len(idx); k++ {
		i0, i1 := idx[k-1], idx[k]
		if a[i1] < level {
			sustained := true
			for j := k + 1; j < min(k+hold, len(idx)); j++ {
				if a[idx[j]] >= level {
					sustained = false
				}
			}
			if !sustained {
				continue
			}
			if a[i0] == a[i1] {
				return p[i1], ""
			}
			t := (a[i0] - level) / (a[i0] - a[i1])
			return p[i0] + t*(p[i1]-p[i0]), ""
		}
	}
	return math.NaN(), fmt.Sprintf("never attenuated below %.2f down to the shortest period %.1f px", level, p[idx[len(idx)-1]])
}

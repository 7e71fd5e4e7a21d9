// Package synth renders exact synthetic speckle images and the true motion
// behind them. It is the oracle for every accuracy test of Mottle.
//
// A speckle pattern is a Boolean model (Sur, Blaysat & Grédiac 2018,
// "Rendering deformed speckle images with a Boolean model", J. Math.
// Imaging Vis. 60:634): discs or Gaussian spots whose centres form a
// Poisson point process. Its intensity can be evaluated at any continuous
// reference point X. A deformed image is rendered by evaluating the pattern
// at X = κ⁻¹(x) for sample points x spread over each pixel of the deformed
// image (pixel integration by supersampling); nothing is interpolated from
// a pixel image, so the truth carries no interpolation error. Optional lens
// blur, sensor noise and quantisation follow.
//
// Coordinates are in pixels with pixel centres at integers: pixel (x, y)
// covers [x−½, x+½]×[y−½, y+½]. Displacement is Lagrangian: u(X) = x(X) − X.
package synth

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
)

// Kind is the shape of the speckles.
type Kind int

const (
	// Disc speckles: discs with a smooth edge of half-width EdgeBlur.
	Disc Kind = iota
	// Gaussian speckles: spots exp(−ρ²/2s²) whose full width at half
	// maximum is the speckle diameter.
	Gaussian
	// Mixed speckles: each speckle is a disc or a Gaussian spot with equal
	// probability.
	Mixed
)

// String returns "disc", "gaussian" or "mixed".
func (k Kind) String() string {
	switch k {
	case Disc:
		return "disc"
	case Gaussian:
		return "gaussian"
	case Mixed:
		return "mixed"
	}
	return fmt.Sprintf("Kind(%d)", int(k))
}

// MarshalText encodes k as its name, for JSON.
func (k Kind) MarshalText() ([]byte, error) {
	if k < Disc || k > Mixed {
		return nil, fmt.Errorf("speckle kind %d: not Disc, Gaussian or Mixed", int(k))
	}
	return []byte(k.String()), nil
}

// UnmarshalText decodes a kind name written by MarshalText.
func (k *Kind) UnmarshalText(b []byte) error {
	v, err := ParseKind(string(b))
	if err != nil {
		return err
	}
	*k = v
	return nil
}

// ParseKind returns the Kind named by s ("disc", "gaussian" or "mixed").
func ParseKind(s string) (Kind, error) {
	for _, k := range []Kind{Disc, Gaussian, Mixed} {
		if k.String() == s {
			return k, nil
		}
	}
	return 0, fmt.Errorf("speckle kind %q: use disc, gaussian or mixed", s)
}

// Rect is an axis-aligned rectangle [X0, X1]×[Y0, Y1] in pixel coordinates.
type Rect struct {
	X0, Y0, X1, Y1 float64
}

// Empty reports whether r has no area.
func (r Rect) Empty() bool { return !(r.X1 > r.X0 && r.Y1 > r.Y0) }

// ImageRect returns the area covered by a w×h pixel image, [−½, w−½]×[−½, h−½],
// grown by margin px on every side.
func ImageRect(w, h int, margin float64) Rect {
	return Rect{-0.5 - margin, -0.5 - margin, float64(w) - 0.5 + margin, float64(h) - 0.5 + margin}
}

// PatternOptions describe a speckle pattern. The zero value of a field
// means its default, listed with each field, except Seed and Bounds.
type PatternOptions struct {
	// Diameter is the mean speckle diameter in px (disc diameter, or the
	// full width at half maximum of a Gaussian spot). Default 5.
	Diameter float64 `json:"diameter_px"`
	// Coverage is the expected fraction of the area covered by speckles,
	// in (0, 1). Default 0.5. The Poisson intensity is λ = −ln(1 − c)/E[area].
	Coverage float64 `json:"coverage"`
	// SizeSpread is the coefficient of variation of the diameter
	// (lognormal distribution); 0 gives equal speckles. Default 0.
	SizeSpread float64 `json:"size_spread"`
	// Background is the grey fraction of the uncovered surface, in [0, 1].
	// Default 0.8.
	Background float64 `json:"background"`
	// Contrast is how much darker a speckle is than the background, as a
	// grey fraction: covered surface has grey Background − Contrast.
	// Negative values give light speckles. Default 0.6.
	Contrast float64 `json:"contrast"`
	// EdgeBlur is the half-width in px of the smooth edge of disc speckles
	// (a C² quintic step from 1 at radius r − EdgeBlur to 0 at r + EdgeBlur).
	// Default 0.5; a negative value gives hard edges.
	EdgeBlur float64 `json:"edge_blur_px"`
	// Kind is the speckle shape. Default Disc.
	Kind Kind `json:"kind"`
	// Seed selects the random pattern; the same options give the same
	// pattern on every machine.
	Seed int64 `json:"seed"`
	// Bounds is the region of reference points where the pattern must be
	// statistically uniform; speckles are placed so that every point of
	// Bounds can be covered. Outside it the pattern fades to background.
	// It must hold every reference point X = κ⁻¹(x) of every image to be
	// rendered. Required; see ImageRect.
	Bounds Rect `json:"bounds"`
}

// withDefaults returns o with zero fields replaced by their defaults.
func (o PatternOptions) withDefaults() PatternOptions {
	if o.Diameter == 0 {
		o.Diameter = 5
	}
	if o.Coverage == 0 {
		o.Coverage = 0.5
	}
	if o.Background == 0 {
		o.Background = 0.8
	}
	if o.Contrast == 0 {
		o.Contrast = 0.6
	}
	if o.EdgeBlur == 0 {
		o.EdgeBlur = 0.5
	}
	if o.EdgeBlur < 0 {
		o.EdgeBlur = 0
	}
	return o
}

// maxSpeckles bounds the number of speckles so a bad request cannot
// exhaust memory.
const maxSpeckles = 20_000_000

// Validate reports every problem of o (after defaults) at once.
func (o PatternOptions) Validate() error {
	o = o.withDefaults()
	var errs []error
	if !(o.Diameter >= 0.5 && o.Diameter <= 1000) {
		errs = append(errs, fmt.Errorf("pattern diameter %g px: use 0.5–1000 px (3–5 px is good practice)", o.Diameter))
	}
	if !(o.Coverage > 0 && o.Coverage < 1) {
		errs = append(errs, fmt.Errorf("pattern coverage %g: use a fraction strictly between 0 and 1, e.g. 0.5", o.Coverage))
	}
	if !(o.SizeSpread >= 0 && o.SizeSpread <= 2) {
		errs = append(errs, fmt.Errorf("pattern size spread %g: use a coefficient of variation in [0, 2]", o.SizeSpread))
	}
	if !(o.Background >= 0 && o.Background <= 1) {
		errs = append(errs, fmt.Errorf("pattern background %g: use a grey fraction in [0, 1]", o.Background))
	}
	if lo := o.Background - o.Contrast; !(lo >= 0 && lo <= 1) {
		errs = append(errs, fmt.Errorf("pattern contrast %g with background %g gives speckle grey %g: keep background − contrast in [0, 1]",
			o.Contrast, o.Background, lo))
	}
	if !(o.EdgeBlur <= o.Diameter) || math.IsNaN(o.EdgeBlur) {
		errs = append(errs, fmt.Errorf("pattern edge blur %g px: use at most the diameter (%g px)", o.EdgeBlur, o.Diameter))
	}
	if o.Kind < Disc || o.Kind > Mixed {
		errs = append(errs, fmt.Errorf("pattern kind %d: use Disc, Gaussian or Mixed", o.Kind))
	}
	b := o.Bounds
	if b.Empty() || math.IsInf(b.X0, 0) || math.IsInf(b.X1, 0) || math.IsInf(b.Y0, 0) || math.IsInf(b.Y1, 0) {
		errs = append(errs, fmt.Errorf("pattern bounds %v: set a non-empty finite rectangle holding every reference point, e.g. synth.ImageRect(w, h, margin)", b))
	} else if len(errs) == 0 {
		area := (b.X1 - b.X0 + 2*o.Diameter) * (b.Y1 - b.Y0 + 2*o.Diameter)
		n := area * intensity(o)
		if n > maxSpeckles {
			errs = append(errs, fmt.Errorf("pattern bounds %v with %g px speckles need about %.3g speckles, over the limit of %d: use a smaller region or larger speckles",
				b, o.Diameter, n, maxSpeckles))
		}
	}
	return errors.Join(errs...)
}

// speckle is one grain, in the form Value needs.
type speckle struct {
	x, y   float64
	out2   float64 // squared support radius: no influence beyond
	in2    float64 // squared radius within which a disc is fully dark
	rout   float64 // support radius
	inv2w  float64 // 1/(2·EdgeBlur) for discs
	k      float64 // 1/(2s²) for Gaussians; 0 for discs
	scale  float64 // Gaussian taper normalisation
	offset float64 // Gaussian taper offset
}

// Pattern is a speckle pattern that can be evaluated at any point. It is
// immutable and safe for concurrent use.
type Pattern struct {
	opts       PatternOptions
	bg, con    float64
	x0, y0     float64
	cell, inv  float64
	nx, ny     int
	start      []int32 // cell k holds items[start[k]:start[k+1]]
	items      []speckle
	count      int
	meanDiam2  float64
	supportMax float64
}

// gaussCut is the value below which a Gaussian spot is cut off (tapered to
// exactly zero, so the pattern stays continuous).
const gaussCut = 1e-6

// fwhmToSigma converts a full width at half maximum to a Gaussian s.
var fwhmToSigma = 1 / (2 * math.Sqrt(2*math.Ln2))

// meanArea returns the expected "ink integral" ∫s of one speckle: the area
// for discs, 2πs² for Gaussian spots (before taper), averaged over the
// diameter distribution and the kinds.
func meanArea(o PatternOptions) float64 {
	ed2 := o.Diameter * o.Diameter * (1 + o.SizeSpread*o.SizeSpread)
	disc := math.Pi / 4 * ed2
	gauss := 2 * math.Pi * ed2 * fwhmToSigma * fwhmToSigma
	switch o.Kind {
	case Gaussian:
		return gauss
	case Mixed:
		return (disc + gauss) / 2
	}
	return disc
}

// intensity returns the Poisson intensity λ (speckles per px²) that gives
// the requested coverage: 1 − exp(−λ E[∫s]) = Coverage.
func intensity(o PatternOptions) float64 {
	return -math.Log1p(-o.Coverage) / meanArea(o)
}

// NewPattern draws a speckle pattern. Options are checked with Validate.
func NewPattern(o PatternOptions) (*Pattern, error) {
	if err := o.Validate(); err != nil {
		return nil, err
	}
	o = o.withDefaults()
	p := &Pattern{opts: o, bg: o.Background, con: o.Contrast}

	// Diameter distribution: lognormal with mean D and coefficient of
	// variation SizeSpread, capped at 4 standard deviations of log d.
	sl := math.Sqrt(math.Log1p(o.SizeSpread * o.SizeSpread))
	mu := math.Log(o.Diameter) - sl*sl/2
	dmax := math.Exp(mu + 4*sl)
	support := func(d float64, gauss bool) float64 {
		if gauss {
			s := d * fwhmToSigma
			return s * math.Sqrt(-2*math.Log(gaussCut))
		}
		return d/2 + o.EdgeBlur
	}
	p.supportMax = max(support(dmax, false), support(dmax, o.Kind != Disc))
	lam := intensity(o)

	// Speckle centres: a Poisson process on Bounds grown by the largest
	// support radius, drawn cell by cell (Poisson count per cell, uniform
	// positions), which is an exact Poisson process and reproducible.
	b := o.Bounds
	gx0, gy0 := b.X0-p.supportMax, b.Y0-p.supportMax
	gx1, gy1 := b.X1+p.supportMax, b.Y1+p.supportMax
	p.cell = max(o.Diameter, 2)
	p.inv = 1 / p.cell
	p.x0, p.y0 = gx0, gy0
	p.nx = int(math.Ceil((gx1 - gx0) * p.inv))
	p.ny = int(math.Ceil((gy1 - gy0) * p.inv))
	rng := rand.New(rand.NewPCG(uint64(o.Seed), 0x5eed5eed))
	mean := lam * p.cell * p.cell
	var grains []speckle
	for cy := 0; cy < p.ny; cy++ {
		for cx := 0; cx < p.nx; cx++ {
			n := poisson(rng, mean)
			for range n {
				x := gx0 + (float64(cx)+rng.Float64())*p.cell
				y := gy0 + (float64(cy)+rng.Float64())*p.cell
				d := o.Diameter
				if o.SizeSpread > 0 {
					d = math.Min(math.Exp(mu+sl*rng.NormFloat64()), dmax)
				}
				gauss := o.Kind == Gaussian
				if o.Kind == Mixed {
					gauss = rng.IntN(2) == 1
				}
				grains = append(grains, makeSpeckle(x, y, d, gauss, o.EdgeBlur, support(d, gauss)))
			}
		}
	}
	p.count = len(grains)
	p.meanDiam2 = o.Diameter * o.Diameter * (1 + o.SizeSpread*o.SizeSpread)

	// Bin each speckle into every cell its support touches.
	nc := p.nx * p.ny
	counts := make([]int32, nc+1)
	each := func(s *speckle, f func(k int)) {
		i0 := max(int(math.Floor((s.x-s.rout-gx0)*p.inv)), 0)
		i1 := min(int(math.Floor((s.x+s.rout-gx0)*p.inv)), p.nx-1)
		j0 := max(int(math.Floor((s.y-s.rout-gy0)*p.inv)), 0)
		j1 := min(int(math.Floor((s.y+s.rout-gy0)*p.inv)), p.ny-1)
		for j := j0; j <= j1; j++ {
			for i := i0; i <= i1; i++ {
				f(j*p.nx + i)
			}
		}
	}
	for i := range grains {
		each(&grains[i], func(k int) { counts[k+1]++ })
	}
	for k := 1; k <= nc; k++ {
		counts[k] += counts[k-1]
	}
	p.start = counts
	p.items = make([]speckle, counts[nc])
	fill := make([]int32, nc)
	copy(fill, counts[:nc])
	for i := range grains {
		s := grains[i]
		each(&s, func(k int) { p.items[fill[k]] = s; fill[k]++ })
	}
	return p, nil
}

func makeSpeckle(x, y, d float64, gauss bool, blur, rout float64) speckle {
	s := speckle{x: x, y: y, rout: rout, out2: rout * rout}
	if gauss {
		sg := d * fwhmToSigma
		s.k = 1 / (2 * sg * sg)
		s.offset = gaussCut
		s.scale = 1 / (1 - gaussCut)
		return s
	}
	r := d / 2
	if blur > 0 {
		rin := math.Max(r-blur, 0)
		s.in2 = rin * rin
		s.inv2w = 1 / (2 * blur)
	} else {
		s.in2 = r * r
	}
	return s
}

// poisson draws a Poisson variate with a small mean (Knuth's product method).
func poisson(rng *rand.Rand, mean float64) int {
	if mean > 30 {
		// Split large means so exp(−mean) does not underflow; a sum of
		// independent Poisson variates is Poisson.
		return poisson(rng, mean/2) + poisson(rng, mean-mean/2)
	}
	l := math.Exp(-mean)
	n := 0
	for prod := rng.Float64(); prod > l; prod *= rng.Float64() {
		n++
	}
	return n
}

// smootherstep is the C² quintic step 6t⁵ − 15t⁴ + 10t³ on [0, 1].
func smootherstep(t float64) float64 {
	if t <= 0 {
		return 0
	}
	if t >= 1 {
		return 1
	}
	return t * t * t * (t*(t*6-15) + 10)
}

// Ink returns the speckle coverage at the reference point (X, Y): 0 on bare
// background, 1 inside a speckle, between at soft edges. Overlapping
// speckles combine as 1 − Π(1 − sᵢ), which is 1 wherever any speckle is
// fully dark and keeps the pattern smooth.
func (p *Pattern) Ink(X, Y float64) float64 {
	fx := (X - p.x0) * p.inv
	fy := (Y - p.y0) * p.inv
	if !(fx >= 0 && fy >= 0) {
		return 0
	}
	i, j := int(fx), int(fy)
	if i >= p.nx || j >= p.ny {
		return 0
	}
	k := j*p.nx + i
	prod := 1.0
	for _, s := range p.items[p.start[k]:p.start[k+1]] {
		dx, dy := X-s.x, Y-s.y
		d2 := dx*dx + dy*dy
		if d2 >= s.out2 {
			continue
		}
		var t float64
		switch {
		case s.k != 0:
			t = (math.Exp(-d2*s.k) - s.offset) * s.scale
		case d2 <= s.in2:
			return 1
		default:
			t = smootherstep((s.rout - math.Sqrt(d2)) * s.inv2w)
		}
		prod *= 1 - t
	}
	return 1 - prod
}

// Value returns the grey fraction of the pattern at the reference point
// (X, Y): Background − Contrast·Ink(X, Y), in [0, 1].
func (p *Pattern) Value(X, Y float64) float64 {
	return p.bg - p.con*p.Ink(X, Y)
}

// Options returns the options the pattern was drawn with, defaults filled in.
func (p *Pattern) Options() PatternOptions { return p.opts }

// Count returns the number of speckles drawn.
func (p *Pattern) Count() int { return p.count }

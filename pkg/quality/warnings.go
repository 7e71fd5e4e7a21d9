package quality

import (
	"errors"
	"fmt"
	"math"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
)

// Thresholds turn measures into warnings. The zero value of a field means
// its default, listed with each field; DefaultThresholds returns them all.
type Thresholds struct {
	// MaxSaturated is the largest tolerated saturated fraction. Default
	// 0.001 (0.1 %). The iDICs Good Practices Guide (2018) asks for no
	// saturated pixels on the specimen (from memory); a few hot or
	// specular pixels are tolerated as common practice.
	MaxSaturated float64 `json:"max_saturated_fraction"`
	// MaxClipped is the largest tolerated black-clipped fraction. Default
	// 0.001 (common practice: clipped pixels carry no pattern).
	MaxClipped float64 `json:"max_black_clipped_fraction"`
	// MinUsedRange is the smallest tolerated used grey range, a fraction
	// of full scale. Default 0.4 (common practice: use a good part of the
	// dynamic range without saturating; the iDICs guide (2018) asks for a
	// well-exposed pattern, from memory).
	MinUsedRange float64 `json:"min_used_range"`
	// MinUsedBits is the smallest tolerated used bit depth, log2 of the
	// used grey levels. Default 6 (64 levels; common practice).
	MinUsedBits float64 `json:"min_used_bits"`
	// MinGradient is the smallest tolerated mean intensity gradient as a
	// fraction of full scale per px. Default 0.02 (5 grey levels per px
	// in 8-bit; common practice, no published bound: with noise σ = 1 %
	// of full scale a 31 px subset then predicts σ_u ≈ 0.02 px).
	MinGradient float64 `json:"min_gradient"`
	// MinSpeckle and MaxSpeckle bound the speckle size in px. Defaults 3
	// and 10: speckles of at least 3 px avoid aliasing (iDICs 2018, from
	// memory: 3–5 px); above 10 px subsets must be large (common practice).
	MinSpeckle float64 `json:"min_speckle_px"`
	MaxSpeckle float64 `json:"max_speckle_px"`
	// MaxEdgeWidth is the largest tolerated edge width in px (blur).
	// Default 4: in-focus rendered patterns measure about 2 px, a Gaussian
	// blur of σ = 1.5 px about 4.5 px (Mottle's own bound, set on rendered
	// images; the iDICs guide (2018) asks for a sharp focus, from memory).
	MaxEdgeWidth float64 `json:"max_edge_width_px"`
	// MaxBrightnessChange is the largest tolerated relative change of mean
	// brightness against the reference. Default 0.1 (common practice;
	// ZNSSD is insensitive to it, but it points at a change of lighting).
	MaxBrightnessChange float64 `json:"max_brightness_change"`
	// MaxContrastDrop is the largest tolerated relative fall of contrast
	// (grey standard deviation) against the reference. Default 0.2
	// (common practice: the predicted noise rises in proportion).
	MaxContrastDrop float64 `json:"max_contrast_drop"`
	// MaxBlurRise is the largest tolerated relative rise of the edge width
	// against the reference. Default 0.3 (Mottle's own bound, as for
	// MaxEdgeWidth).
	MaxBlurRise float64 `json:"max_blur_rise"`
}

// DefaultThresholds returns the thresholds with every default filled in.
func DefaultThresholds() Thresholds { return Thresholds{}.withDefaults() }

func (t Thresholds) withDefaults() Thresholds {
	def := func(p *float64, v float64) {
		if *p == 0 {
			*p = v
		}
	}
	def(&t.MaxSaturated, 0.001)
	def(&t.MaxClipped, 0.001)
	def(&t.MinUsedRange, 0.4)
	def(&t.MinUsedBits, 6)
	def(&t.MinGradient, 0.02)
	def(&t.MinSpeckle, 3)
	def(&t.MaxSpeckle, 10)
	def(&t.MaxEdgeWidth, 4)
	def(&t.MaxBrightnessChange, 0.1)
	def(&t.MaxContrastDrop, 0.2)
	def(&t.MaxBlurRise, 0.3)
	return t
}

// Validate reports every problem of t (after defaults) at once.
func (t Thresholds) Validate() error {
	t = t.withDefaults()
	var errs []error
	frac := func(name string, v float64) {
		if !(v > 0 && v <= 1) {
			errs = append(errs, fmt.Errorf("quality threshold %s = %v: want a fraction in (0, 1]", name, v))
		}
	}
	frac("max_saturated_fraction", t.MaxSaturated)
	frac("max_black_clipped_fraction", t.MaxClipped)
	frac("min_used_range", t.MinUsedRange)
	frac("min_gradient", t.MinGradient)
	frac("max_brightness_change", t.MaxBrightnessChange)
	frac("max_contrast_drop", t.MaxContrastDrop)
	if !(t.MinUsedBits > 0 && t.MinUsedBits <= 16) {
		errs = append(errs, fmt.Errorf("quality threshold min_used_bits = %v: want 1–16", t.MinUsedBits))
	}
	if !(t.MinSpeckle > 0 && t.MinSpeckle < t.MaxSpeckle) || math.IsInf(t.MaxSpeckle, 0) {
		errs = append(errs, fmt.Errorf("quality thresholds min/max_speckle_px = %v/%v: want 0 < min < max", t.MinSpeckle, t.MaxSpeckle))
	}
	if !(t.MaxEdgeWidth > 0) || math.IsInf(t.MaxEdgeWidth, 0) {
		errs = append(errs, fmt.Errorf("quality threshold max_edge_width_px = %v: want a positive width", t.MaxEdgeWidth))
	}
	if !(t.MaxBlurRise > 0) || math.IsInf(t.MaxBlurRise, 0) {
		errs = append(errs, fmt.Errorf("quality threshold max_blur_rise = %v: want a positive fraction", t.MaxBlurRise))
	}
	return errors.Join(errs...)
}

// Codes of the warnings.
const (
	Saturated        = "saturated"
	Clipped          = "black_clipped"
	NarrowRange      = "narrow_range"
	FewLevels        = "few_levels"
	WeakGradient     = "weak_gradient"
	SmallSpeckles    = "small_speckles"
	LargeSpeckles    = "large_speckles"
	Blurred          = "blurred"
	BrightnessChange = "brightness_change"
	ContrastDrop     = "contrast_drop"
	BlurRise         = "blur_rise"
)

// Warning is one problem found in an image, with the fix at the bench.
type Warning struct {
	// Code names the problem: one of the constants Saturated … BlurRise.
	Code string `json:"code"`
	// Image names the image: "reference", "deformed", "frame 12", ….
	Image string `json:"image"`
	// Value is the measured value and Limit the threshold it crossed, in
	// the unit of the measure.
	Value float64 `json:"value"`
	Limit float64 `json:"limit"`
	// Message says what is wrong, Action what to change at the bench, and
	// Source where the threshold comes from.
	Message string `json:"message"`
	Action  string `json:"action"`
	Source  string `json:"source"`
}

// String returns the warning as one line: image, message, action.
func (w Warning) String() string {
	return fmt.Sprintf("%s: %s; %s (%s)", w.Image, w.Message, w.Action, w.Source)
}

const (
	srcCommon = "common practice"
	srcIDICs  = "iDICs Good Practices Guide 2018 (from memory) and common practice"
	srcOwn    = "Mottle's own bound, set on rendered images"
)

// Check returns the warnings for the measures m of the image named image,
// in a fixed order, or none for a good image. t must be valid (zero fields
// take their defaults).
func Check(m Measures, image string, t Thresholds) []Warning {
	t = t.withDefaults()
	var ws []Warning
	add := func(code string, v, lim float64, src, msg, act string) {
		ws = append(ws, Warning{Code: code, Image: image, Value: v, Limit: lim, Message: msg, Action: act, Source: src})
	}
	if m.Saturated > t.MaxSaturated {
		add(Saturated, m.Saturated, t.MaxSaturated, srcIDICs,
			fmt.Sprintf("%.2g %% of the pixels are saturated (at %g, the top of the %d-bit range); the pattern is lost there",
				100*m.Saturated, m.FullScale, m.SignalBits),
			"shorten the exposure, close the aperture or dim the lights, and remove glare (polariser, diffuse light) until no pixel saturates")
	}
	if m.Clipped > t.MaxClipped {
		add(Clipped, m.Clipped, t.MaxClipped, srcCommon,
			fmt.Sprintf("%.2g %% of the pixels are black (grey level 0); the pattern is lost there", 100*m.Clipped),
			"lengthen the exposure, open the aperture or add light, or raise the camera's black level")
	}
	if m.UsedRange < t.MinUsedRange {
		add(NarrowRange, m.UsedRange, t.MinUsedRange, srcIDICs,
			fmt.Sprintf("the pattern uses %.0f %% of the %d-bit grey range", 100*m.UsedRange, m.SignalBits),
			"lengthen the exposure or add light until the brightest speckles come near the top of the range without saturating; check the pattern contrast")
	}
	if m.UsedBits < t.MinUsedBits {
		add(FewLevels, m.UsedBits, t.MinUsedBits, srcCommon,
			fmt.Sprintf("only %d grey levels are used (%.1f bits)", m.UsedLevels, m.UsedBits),
			"expose brighter, record at the camera's full bit depth (12 or 16 bit, not 8), and avoid compression")
	}
	if g := m.MeanGradient / m.FullScale; g < t.MinGradient && !math.IsNaN(g) {
		add(WeakGradient, g, t.MinGradient, srcCommon,
			fmt.Sprintf("the mean intensity gradient is %.3g grey levels/px (%.2g %% of full scale per px); displacement noise will be high",
				m.MeanGradient, 100*g),
			"raise the pattern contrast (darker speckles on a brighter ground), the exposure and the focus, or use larger subsets")
	}
	if !math.IsNaN(m.SpeckleSize) {
		if m.SpeckleSize < t.MinSpeckle {
			add(SmallSpeckles, m.SpeckleSize, t.MinSpeckle, srcIDICs,
				fmt.Sprintf("the speckles measure %.1f px; below %g px the pattern aliases", m.SpeckleSize, t.MinSpeckle),
				"move the camera closer or use a longer lens, or apply a coarser pattern")
		}
		if m.SpeckleSize > t.MaxSpeckle {
			add(LargeSpeckles, m.SpeckleSize, t.MaxSpeckle, srcCommon,
				fmt.Sprintf("the speckles measure %.1f px; subsets must be large and spatial resolution suffers", m.SpeckleSize),
				"apply a finer pattern or move the camera back; if the image is blurred, focus first")
		}
	}
	if m.EdgeWidth > t.MaxEdgeWidth {
		add(Blurred, m.EdgeWidth, t.MaxEdgeWidth, srcOwn,
			fmt.Sprintf("speckle edges are %.1f px wide; the image looks out of focus or moved during the exposure", m.EdgeWidth),
			"refocus on the specimen surface (with the aperture open, then stop down for depth of field), shorten the exposure, and check for vibration")
	}
	return ws
}

// Change is how an image differs from its reference.
type Change struct {
	// Brightness is the relative change of mean grey level, Contrast of
	// the grey standard deviation and Blur of the edge width: cur/ref − 1.
	Brightness float64 `json:"brightness_change"`
	Contrast   float64 `json:"contrast_change"`
	Blur       float64 `json:"blur_change"`
	// NewSaturated is the saturated fraction of the image minus that of
	// the reference.
	NewSaturated float64 `json:"new_saturated_fraction"`
}

// Compare returns the change of cur against the reference ref and the
// warnings it gives, for the image named image. Saturation that appears is
// reported by Check on cur; Compare reports brightness, contrast and blur.
func Compare(ref, cur Measures, image string, t Thresholds) (Change, []Warning) {
	t = t.withDefaults()
	rel := func(a, b float64) float64 {
		if b == 0 || math.IsNaN(a) || math.IsNaN(b) {
			return 0
		}
		return a/b - 1
	}
	c := Change{
		Brightness:   rel(cur.Mean, ref.Mean),
		Contrast:     rel(cur.Std, ref.Std),
		Blur:         rel(cur.EdgeWidth, ref.EdgeWidth),
		NewSaturated: cur.Saturated - ref.Saturated,
	}
	var ws []Warning
	add := func(code string, v, lim float64, src, msg, act string) {
		ws = append(ws, Warning{Code: code, Image: image, Value: v, Limit: lim, Message: msg, Action: act, Source: src})
	}
	if math.Abs(c.Brightness) > t.MaxBrightnessChange {
		add(BrightnessChange, c.Brightness, t.MaxBrightnessChange, srcCommon,
			fmt.Sprintf("mean brightness changed by %+.0f %% against the reference", 100*c.Brightness),
			"keep the lighting and exposure fixed during the test; shield the specimen from daylight and flicker")
	}
	if c.Contrast < -t.MaxContrastDrop {
		add(ContrastDrop, c.Contrast, -t.MaxContrastDrop, srcCommon,
			fmt.Sprintf("contrast fell by %.0f %% against the reference; displacement noise rises in proportion", -100*c.Contrast),
			"check the lighting and exposure, glare, and whether the paint is flaking or the surface is changing")
	}
	if c.Blur > t.MaxBlurRise {
		add(BlurRise, c.Blur, t.MaxBlurRise, srcOwn,
			fmt.Sprintf("speckle edges are %.0f %% wider than in the reference (%.1f px)", 100*c.Blur, cur.EdgeWidth),
			"the specimen moved out of the depth of field or the camera moved: stop down or refocus, and check the camera mount")
	}
	return c, ws
}

// Report is the quality of one image: its measures, its change against
// the reference (nil for the reference itself) and the warnings of both.
type Report struct {
	Image    string    `json:"image"`
	Measures Measures  `json:"measures"`
	Change   *Change   `json:"change,omitempty"`
	Warnings []Warning `json:"warnings"`
}

// Assess measures g over mask (nil = whole image), checks it, and compares
// it with ref when ref is not nil. The Report's Measures are Clean (no NaN),
// so it encodes as JSON; Warnings is empty, not nil, for a good image.
// Errors are those of Measure.
func Assess(g *imageio.Gray, mask *roi.Mask, image string, ref *Measures, t Thresholds) (Report, error) {
	m, err := Measure(g, mask)
	if err != nil {
		return Report{}, fmt.Errorf("%s image: %w", image, err)
	}
	return report(m, image, ref, t), nil
}

// report builds the Report of image from its measures m: its own warnings
// and, when ref is given, the change against the reference's measures.
func report(m Measures, image string, ref *Measures, t Thresholds) Report {
	r := Report{Image: image, Measures: m.Clean(), Warnings: Check(m, image, t)}
	if ref != nil {
		c, ws := Compare(*ref, m, image, t)
		r.Change = &c
		r.Warnings = append(r.Warnings, ws...)
	}
	if r.Warnings == nil {
		r.Warnings = []Warning{}
	}
	return r
}

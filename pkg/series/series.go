// Package series analyses a test series: a reference image and a sequence
// of frames taken while the specimen is loaded. It tracks the material
// points of the reference grid through every frame, reads virtual
// extensometers and gauges, combines them with time stamps and the load
// signal into a curve, and derives material properties and a report.
//
// # Tracking
//
// Every frame is referred to the reference (total Lagrangian) and the
// correlation of frame n starts from the solution of frame n−1. When the
// correlation with the reference degrades (mean ZNCC or the fraction of
// still-valid points below a threshold), the tracker switches to
// incremental correlation: it correlates frame n−1 with frame n at the
// current positions x_{n−1}(X) of the material points and composes the
// mappings at the same material point,
//
//	x_n(X) = φ_n(x_{n−1}(X)),  F_n(X) = ∇φ_n(x_{n−1}(X))·F_{n−1}(X),
//
// so results stay referred to the reference configuration. Displacements of
// different points are never added. Each frame's Summary says which mode
// was used ("direct" or "incremental").
//
// Once switched, the tracker stays incremental unless Params.ReturnDirect
// is set: then each incremental frame is also correlated with the
// reference, starting from the composed mapping, and the tracker returns
// to direct correlation when that meets the switch thresholds. Points lost
// in an incremental frame (an occlusion, a glare spot) are re-acquired
// when their neighbours are still tracked: the point's position in the
// previous frame is predicted from the neighbours' mappings, x ≈ x_j +
// F_j·(X − X_j), and it is correlated from there, so it continues from
// where the material is rather than staying lost. Summary.Reacquired counts
// them.
//
// # Use
//
// The engine runs frame by frame so that a server can drive it and survive
// restarts:
//
//	t, err := series.New(ref, series.FrameMeta{Time: &t0}, p)
//	for each frame {
//		fr, err := t.Add(ctx, img, series.FrameMeta{Name: name, Time: &t, Load: &f})
//		... fr.Summary, fr.Quantities ...
//		st := t.State()          // JSON-serialisable; store it
//	}
//	t2, err := series.Restore(ref, lastFrame, st) // after a restart
//	curve := t2.Curve()
//
// Results from an optical measurement carry uncertainty; where they feed
// safety decisions, confirm them with a calibrated extensometer (ASTM E83,
// ISO 9513) and defer to the applicable codes and a licensed engineer.
package series

import (
	"errors"
	"fmt"
	"math"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
)

// Modes of correlating a frame, as reported in Summary.Mode.
const (
	// ModeReference marks the reference frame itself (row 0 of a curve).
	ModeReference = "reference"
	// ModeDirect: the frame was correlated with the reference image.
	ModeDirect = "direct"
	// ModeIncremental: the frame was correlated with the previous frame and
	// the mapping composed with the previous one.
	ModeIncremental = "incremental"
)

// Incremental policies for Params.Incremental.
const (
	// IncrementalAuto switches to incremental correlation when the direct
	// correlation degrades (the default).
	IncrementalAuto = "auto"
	// IncrementalNever always correlates with the reference.
	IncrementalNever = "never"
	// IncrementalAlways correlates every frame with the previous one.
	IncrementalAlways = "always"
)

// Params are the settings of a series analysis. JSON names are those of
// the CLI flags and the HTTP API.
type Params struct {
	// Analysis are the correlation and strain parameters used for every
	// frame (see pkg/analysis).
	Analysis analysis.Params `json:"analysis"`
	// Incremental is "auto" (default), "never" or "always".
	Incremental string `json:"incremental"`
	// SwitchZNCC: in auto mode, a direct frame whose mean ZNCC over the
	// valid points falls below this is redone incrementally. Default 0.9.
	SwitchZNCC float64 `json:"switch_zncc"`
	// SwitchValid: in auto mode, a direct frame in which fewer than this
	// fraction of the points valid in the first frame are still valid is
	// redone incrementally. Default 0.9.
	SwitchValid float64 `json:"switch_valid"`
	// ReturnDirect: in auto mode, once incremental, also correlate each
	// frame with the reference, starting from the composed solution, and
	// return to direct correlation when that meets SwitchZNCC and
	// SwitchValid. Direct frames carry no error from earlier frames, while
	// the errors of an incremental chain add up like a random walk (common
	// practice). It costs one more correlation per incremental frame.
	// Default false.
	ReturnDirect bool `json:"return_direct,omitempty"`
	// Units of extensometer and gauge coordinates: "px" (default) or "mm"
	// (needs Analysis.MMPerPx or ScalePoints). Output lengths (u, v,
	// extensometer lengths, velocities) are in mm whenever the analysis
	// sets a scale, and in px otherwise: the one unit rule of pkg/results.
	Units string `json:"units"`
	// Extensometers and Gauges are read in every frame.
	Extensometers []Extensometer `json:"extensometers,omitempty"`
	Gauges        []Gauge        `json:"gauges,omitempty"`
	// Area is the specimen's initial cross-section in mm²; with loads in N
	// it gives the engineering stress in MPa. 0 = no stress.
	Area float64 `json:"area_mm2"`
	// StaticFrames is the number of frames, after the reference, taken
	// without load or motion; they give the noise floor. Default 0.
	StaticFrames int `json:"static_frames"`
	// Properties selects the material properties derived from the curve.
	Properties PropsParams `json:"properties"`
}

// PropsParams select the curve data and ranges for material properties.
// A property whose inputs are missing is skipped, with the reason listed in
// Properties.Skipped.
type PropsParams struct {
	// Axial names the source of the axial engineering strain: an
	// extensometer, or "gauge:NAME:COMPONENT" for the mean of a gauge's
	// E11, E22, H11, H22, eps11 or eps22 converted to engineering strain
	// (more points, less random error than two end points). Default the
	// first extensometer.
	Axial string `json:"axial,omitempty"`
	// Transverse names the source across the specimen (width), as Axial,
	// used for Poisson's ratio and r; empty = none.
	Transverse string `json:"transverse,omitempty"`
	// ModulusRange is the axial strain range [lo, hi] of the modulus fit
	// (ASTM E111); zero = no modulus, offset yield or Poisson's ratio.
	ModulusRange [2]float64 `json:"modulus_range"`
	// PoissonRange is the axial strain range for Poisson's ratio
	// (ASTM E132); zero = ModulusRange.
	PoissonRange [2]float64 `json:"poisson_range"`
	// Offset of the offset yield strength as a strain; default 0.002.
	Offset float64 `json:"offset"`
	// RRange is the axial strain range for the r value (ISO 10113); zero =
	// no r value.
	RRange [2]float64 `json:"r_range"`
}

// FrameMeta describes one frame: its name (a file name, say), time stamp
// in seconds and load in newtons, each optional, and where Add reports its
// progress.
type FrameMeta struct {
	Name string   `json:"name,omitempty"`
	Time *float64 `json:"time_s,omitempty"`
	Load *float64 `json:"load_N,omitempty"`
	// Orientation is the EXIF orientation the frame was turned by (the
	// reference's, see imageio.OrientSeries); results record it when the
	// frame was not used as stored.
	Orientation imageio.Orientation `json:"orientation,omitempty"`
	// Progress, if not nil, is called by Add from the calling goroutine
	// with the number of point correlations done and the number known so
	// far. A frame can take several passes (direct, then incremental, then
	// re-acquisition or a check against the reference), each adding its
	// points to the total when it starts, so done never decreases but
	// total may grow; the last call has done == total.
	Progress func(done, total int) `json:"-"`
}

// Summary is one frame's row of the curve.
type Summary struct {
	// Index is 0 for the reference and 1, 2, … for the frames added.
	Index int      `json:"index"`
	Name  string   `json:"name,omitempty"`
	Time  *float64 `json:"time_s,omitempty"`
	Load  *float64 `json:"load_N,omitempty"`
	// Stress is Load/Area in MPa, when both are known.
	Stress *float64 `json:"stress_MPa,omitempty"`
	// Mode is ModeReference, ModeDirect or ModeIncremental.
	Mode string `json:"mode"`
	// ReturnedDirect is true for a frame that was first done incrementally
	// and then, checked against the reference (Params.ReturnDirect),
	// returned to direct correlation.
	ReturnedDirect bool `json:"returned_to_direct,omitempty"`
	// Reacquired is the number of points that were lost before this
	// incremental frame, or in it, and were found again from their
	// neighbours' mappings.
	Reacquired int `json:"reacquired,omitempty"`
	// Static is true for the frames that make up the noise floor.
	Static bool `json:"static,omitempty"`
	// ValidFraction is the fraction of grid points with a valid result;
	// Tracked the fraction of the points valid in the first frame that are
	// still valid.
	ValidFraction float64 `json:"valid_fraction"`
	Tracked       float64 `json:"tracked_fraction"`
	// MeanZNCC is the mean ZNCC over valid points; in incremental mode it
	// is that of the last increment.
	MeanZNCC float64 `json:"mean_zncc"`
	// Mean holds the mean over valid points of u, v (in Units) and of the
	// strain components E11, E22, E12, eps11, eps22, eps12, H11, H22, H12.
	Mean map[string]float64 `json:"mean"`
	// Extensometers and Gauges are the virtual instrument readings.
	Extensometers []ExtReading   `json:"extensometers,omitempty"`
	Gauges        []GaugeReading `json:"gauges,omitempty"`
	// Quality is the frame's image quality and whether it is flagged for a
	// drop against the reference; nil until measured.
	Quality *FrameQuality `json:"quality,omitempty"`
}

// MeanNames lists the quantities averaged into Summary.Mean, in order.
var MeanNames = []string{"u", "v", "E11", "E22", "E12", "eps11", "eps22", "eps12", "H11", "H22", "H12"}

// withDefaults fills zero fields with their documented defaults.
func (p Params) withDefaults() Params {
	if p.Incremental == "" {
		p.Incremental = IncrementalAuto
	}
	if p.SwitchZNCC == 0 {
		p.SwitchZNCC = 0.9
	}
	if p.SwitchValid == 0 {
		p.SwitchValid = 0.9
	}
	if p.Units == "" {
		p.Units = "px"
	}
	if p.Properties.Offset == 0 {
		p.Properties.Offset = 0.002
	}
	if p.Properties.PoissonRange == [2]float64{} {
		p.Properties.PoissonRange = p.Properties.ModulusRange
	}
	if p.Properties.Axial == "" && len(p.Extensometers) > 0 {
		p.Properties.Axial = p.Extensometers[0].Name
	}
	return p
}

// Defaults returns the series parameters used where none are set: the
// analysis defaults of pkg/analysis, except quintic B-spline interpolation
// on images prefiltered with a Gaussian of σ = 0.8 px. Elastic strains of
// a tensile test move points by tenths of a pixel, where the interpolation
// bias is nearly proportional to the shift: on rendered 4 px speckles it
// is a gain error of 1–3 % with cubic splines and about 0.2 % with these
// settings (measured; prefiltering against bias: Pan 2013, Opt. Lasers
// Eng. 51:1161, reference from memory). They cost about twice the time.
func Defaults() Params {
	a := analysis.Defaults()
	a.Interpolation = "quintic"
	a.Prefilter = 0.8
	return Params{Analysis: a}.withDefaults()
}

// Validate checks p (after defaults) for reference images of w×h px
// (w, h ≤ 0 skips the size checks) and returns every problem at once, as
// an *analysis.ValidationError whose problems name their field: the
// analysis parameters by their own names (subset, step, …), the series
// ones by theirs (incremental, gauges[1], properties.axial, …).
func (p Params) Validate(w, h int) error {
	p = p.withDefaults()
	var ps []analysis.Problem
	add := func(field, format string, a ...any) {
		ps = append(ps, analysis.Problem{Field: field, Message: fmt.Sprintf(format, a...)})
	}
	if err := p.Analysis.Validate(w, h); err != nil {
		var ve *analysis.ValidationError
		if errors.As(err, &ve) {
			ps = append(ps, ve.Problems...)
		} else {
			add("analysis", "%v", err)
		}
	}
	switch p.Incremental {
	case IncrementalAuto, IncrementalNever, IncrementalAlways:
	default:
		add("incremental", "%q: use auto, never or always", p.Incremental)
	}
	if !(p.SwitchZNCC > -1 && p.SwitchZNCC <= 1) {
		add("switch_zncc", "%g: use a value in (-1, 1], e.g. 0.9", p.SwitchZNCC)
	}
	if !(p.SwitchValid > 0 && p.SwitchValid <= 1) {
		add("switch_valid", "%g: use a fraction in (0, 1], e.g. 0.9", p.SwitchValid)
	}
	switch p.Units {
	case "px":
	case "mm":
		if p.Analysis.Calibration != nil {
			add("units", "\"mm\" with a calibration: give extensometer and gauge coordinates in reference-image px (units \"px\"); the calibration turns results into mm")
		} else if !(p.Analysis.MMPerPx > 0) && p.Analysis.ScalePoints == nil {
			add("units", "\"mm\": set analysis.mm_per_px or analysis.scale_points")
		}
	default:
		add("units", "%q: use px or mm", p.Units)
	}
	if !finite(p.Area) || p.Area < 0 {
		add("area_mm2", "%g: use 0 (no stress) or the positive cross-section in mm²", p.Area)
	}
	if p.StaticFrames < 0 {
		add("static_frames", "%d: use 0 or more", p.StaticFrames)
	}
	ps = append(ps, validateGeometry(p.Extensometers, p.Gauges)...)
	ps = append(ps, p.Properties.validate(p.Extensometers, p.Gauges)...)
	if len(ps) > 0 {
		return &analysis.ValidationError{Problems: ps}
	}
	return nil
}

func (pp PropsParams) validate(ext []Extensometer, gs []Gauge) []analysis.Problem {
	var ps []analysis.Problem
	add := func(field, format string, a ...any) {
		ps = append(ps, analysis.Problem{Field: "properties." + field, Message: fmt.Sprintf(format, a...)})
	}
	check := func(field, n string) {
		if g, comp, ok := gaugeSource(n); ok {
			for _, gg := range gs {
				if gg.Name != g {
					continue
				}
				for _, c := range gg.components() {
					if c == comp && sourceComponents[c] {
						return
					}
				}
				add(field, "%q: gauge %q has no component %q among E11, E22, H11, H22, eps11, eps22", n, g, comp)
				return
			}
			add(field, "%q: no gauge named %q", n, g)
			return
		}
		for _, e := range ext {
			if e.Name == n {
				return
			}
		}
		add(field, "%q: no extensometer of that name (or give gauge:NAME:E11)", n)
	}
	if pp.Axial != "" {
		check("axial", pp.Axial)
	}
	if pp.Transverse != "" {
		check("transverse", pp.Transverse)
	}
	for _, r := range []struct {
		name string
		v    [2]float64
	}{{"modulus_range", pp.ModulusRange}, {"poisson_range", pp.PoissonRange}, {"r_range", pp.RRange}} {
		if r.v != [2]float64{} && (!finite(r.v[0], r.v[1]) || !(r.v[1] > r.v[0])) {
			add(r.name, "%v: give [lo, hi] with lo < hi, as strains (0.002, not 0.2 %%)", r.v)
		}
	}
	if !(pp.Offset > 0 && pp.Offset < 0.1) {
		add("offset", "%g: use a strain such as 0.002 (0.2 %%)", pp.Offset)
	}
	return ps
}

// outScale returns the factor from px to the output lengths: the image
// scale in mm per px whenever one is set (the one unit rule of
// pkg/results), else 1.
func (p Params) outScale() float64 {
	if s := p.Analysis.Scale(); s > 0 {
		return s
	}
	return 1
}

// outUnit returns the unit of output lengths, "mm" or "px" (the
// calibration's unit under a calibration).
func (p Params) outUnit() string { return p.Analysis.LengthUnit() }

// buildOptions returns the options of the field builder for the series'
// frames.
func (p Params) buildOptions() results.Options {
	o := analysis.BuildOptions(p.Analysis)
	o.Params, o.Software = p, "mottle series"
	return o
}

// lengthScale returns the factor from the units of extensometer and gauge
// coordinates (Units) to px.
func (p Params) lengthScale() float64 {
	if p.Units != "mm" {
		return 1
	}
	if p.Analysis.MMPerPx > 0 {
		return p.Analysis.MMPerPx
	}
	if s := p.Analysis.ScalePoints; s != nil {
		return s.Distance / math.Hypot(s.B[0]-s.A[0], s.B[1]-s.A[1])
	}
	return 1
}

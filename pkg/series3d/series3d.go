// Package series3d runs a test series measured with two cameras: the
// reference pair is matched once (pkg/stereo), every later pair is tracked
// from it, and each frame's virtual extensometers and gauges are read in
// space, so that lengths are lengths on the specimen however it moves
// toward or away from the cameras. The readings fill the same curve as a
// 2D series (series.Curve), so the CSV, the material properties and the
// plots of pkg/series apply unchanged.
//
// Extensometer end points and gauge regions are given in px of the left
// reference image, where the engineer draws them. An extensometer's
// length is the distance in space between the 3D positions of its end
// points (interpolated from the surrounding measured points); a gauge
// averages the surface strains (pkg/stereo Strain: E11 along the left
// image's x axis projected on the local tangent plane) of the measured
// points inside it.
package series3d

import (
	"context"
	"errors"
	"fmt"
	"math"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/spline"
	"github.com/mottledic/mottle/pkg/stereo"
)

// Params are the parameters of a stereo series.
type Params struct {
	// Subset and Step are the subset side and grid step in px (defaults
	// those of pkg/correlate); StrainWindow the side of the surface strain
	// window in grid points (default 5).
	Subset       int `json:"subset,omitempty"`
	Step         int `json:"step,omitempty"`
	StrainWindow int `json:"strain_window,omitempty"`
	// Prefilter is the Gaussian prefilter σ in px against interpolation
	// bias; nil means 0.7 px, 0 turns it off.
	Prefilter *float64 `json:"prefilter_px,omitempty"`
	// MinDepth and MaxDepth bound the epipolar search, mm from the left
	// camera (0: the defaults of pkg/stereo).
	MinDepth float64 `json:"min_depth_mm,omitempty"`
	MaxDepth float64 `json:"max_depth_mm,omitempty"`
	// ROI is the region of interest of the left reference image (nil: the
	// whole image).
	ROI *roi.Spec `json:"roi,omitempty"`
	// Extensometers and Gauges are given in px of the left reference
	// image; lengths are measured in space, in mm.
	Extensometers []series.Extensometer `json:"extensometers,omitempty"`
	Gauges        []series.Gauge        `json:"gauges,omitempty"`
	// Area is the initial cross-section in mm²; with loads in N it gives
	// the engineering stress in MPa. 0 = no stress.
	Area float64 `json:"area_mm2,omitempty"`
	// Properties select the material properties (see series.PropsParams).
	Properties series.PropsParams `json:"properties"`
	// StaticFrames is the number of frames, after the reference pair,
	// taken without load or motion: their spread gives the noise floor of
	// the curve (series.NoiseFloor, u, v, w in mm and the surface
	// strains). Default 0.
	StaticFrames int `json:"static_frames,omitempty"`
	// Incremental is how each pair is tracked, with the policies of a 2D
	// series: "never" (the default: from the reference pair, so that no
	// error is carried from frame to frame), "always" (from the previous
	// pair: stereo.TrackFrom) or "auto" (from the reference pair until a
	// frame keeps fewer than switchValid of the points or its mean ZNCC
	// falls below switchZNCC, then from the previous pair).
	Incremental string `json:"incremental,omitempty"`
	// Threads caps the correlation's goroutines (0 = all cores); results
	// do not depend on it, and it is not stored.
	Threads int `json:"-"`
}

// components are the gauge components a stereo gauge can average.
var components = map[string]bool{"E11": true, "E22": true, "E12": true, "H11": true, "H22": true, "H12": true,
	"E_max": true, "E_min": true, "w_normal": true}

// Options returns the stereo options of the parameters for w×h images.
func (p Params) Options(w, h int) (stereo.Options, error) {
	pf := 0.7
	if p.Prefilter != nil {
		pf = *p.Prefilter
	}
	o := stereo.Options{Correlate: correlate.Options{Subset: p.Subset, Step: p.Step, Interp: spline.Quintic, Prefilter: pf},
		MinDepth: p.MinDepth, MaxDepth: p.MaxDepth}
	o.Correlate.Threads = p.Threads
	if p.ROI != nil {
		m, err := p.ROI.Mask(w, h)
		if err != nil {
			return o, fmt.Errorf("roi: %w", err)
		}
		o.Correlate.Mask = m
	}
	return o, nil
}

// Validate reports every problem of the parameters for w×h images, each
// naming its field.
func (p Params) Validate(w, h int) error {
	var errs []error
	bad := func(f string, a ...any) { errs = append(errs, fmt.Errorf(f, a...)) }
	if o, err := p.Options(w, h); err != nil {
		errs = append(errs, err)
	} else if err := o.Validate(); err != nil {
		errs = append(errs, err)
	}
	if p.StrainWindow != 0 && (p.StrainWindow < 3 || p.StrainWindow%2 == 0 || p.StrainWindow > 51) {
		bad("strain_window %d: want an odd number of grid points from 3 to 51 (0 for the default 5)", p.StrainWindow)
	}
	if p.Prefilter != nil && !(*p.Prefilter >= 0 && *p.Prefilter <= 5) {
		bad("prefilter_px %g: want 0 (off) to 5 px", *p.Prefilter)
	}
	switch p.Incremental {
	case "", series.IncrementalNever, series.IncrementalAlways, series.IncrementalAuto:
	default:
		bad("incremental %q: want never (from the reference pair), always (from the previous pair) or auto", p.Incremental)
	}
	if p.StaticFrames < 0 {
		bad("static_frames %d: want 0 or more frames without load or motion after the reference pair", p.StaticFrames)
	}
	if !(p.Area >= 0) || math.IsInf(p.Area, 0) {
		bad("area_mm2 %g: want a positive cross-section in mm² (0 for no stress)", p.Area)
	}
	in := func(x, y float64) bool { return x >= 0 && y >= 0 && x <= float64(w-1) && y <= float64(h-1) }
	names := map[string]bool{}
	for i, e := range p.Extensometers {
		if e.Name == "" || names["ext:"+e.Name] {
			bad("extensometers[%d]: give each extensometer a name of its own", i)
		}
		names["ext:"+e.Name] = true
		for _, q := range [][2]float64{e.A, e.B} {
			if !in(q[0], q[1]) {
				bad("extensometers[%d] (%s): end point (%g, %g) is outside the %d×%d left reference image (give px of that image)", i, e.Name, q[0], q[1], w, h)
			}
		}
		if e.A == e.B {
			bad("extensometers[%d] (%s): both end points are (%g, %g): give two distinct points", i, e.Name, e.A[0], e.A[1])
		}
	}
	for i, g := range p.Gauges {
		if g.Name == "" || names["gauge:"+g.Name] {
			bad("gauges[%d]: give each gauge a name of its own", i)
		}
		names["gauge:"+g.Name] = true
		if g.Rect == nil && len(g.Polygon) < 3 {
			bad("gauges[%d] (%s): give a rect [x0, y0, x1, y1] or a polygon of at least 3 vertices, px of the left reference image", i, g.Name)
		}
		if r := g.Rect; r != nil && !(r[0] < r[2] && r[1] < r[3]) {
			bad("gauges[%d] (%s): rect %v: want x0 < x1 and y0 < y1", i, g.Name, *r)
		}
		for _, c := range g.Components {
			if !components[c] {
				bad("gauges[%d] (%s): component %q: want E11, E22, E12, H11, H22, H12, E_max, E_min or w_normal", i, g.Name, c)
			}
		}
	}
	check := func(field, src string) {
		if src == "" {
			return
		}
		if g, c, ok := cutGauge(src); ok {
			if !names["gauge:"+g] {
				bad("properties.%s %q: no gauge of that name", field, src)
			} else if c != "E11" && c != "E22" && c != "H11" && c != "H22" {
				bad("properties.%s %q: component %s: want E11, E22, H11 or H22", field, src, c)
			}
			return
		}
		if !names["ext:"+src] {
			bad("properties.%s %q: no extensometer of that name (or give gauge:NAME:E11)", field, src)
		}
	}
	check("axial", p.Properties.Axial)
	check("transverse", p.Properties.Transverse)
	return errors.Join(errs...)
}

// cutGauge splits "gauge:NAME:COMPONENT".
func cutGauge(s string) (name, comp string, ok bool) {
	const pre = "gauge:"
	if len(s) <= len(pre) || s[:len(pre)] != pre {
		return "", "", false
	}
	rest := s[len(pre):]
	for i := len(rest) - 1; i > 0; i-- {
		if rest[i] == ':' {
			return rest[:i], rest[i+1:], true
		}
	}
	return "", "", false
}

// gaugeComponents returns the components a gauge averages (default E11,
// E22, E12).
func gaugeComponents(g series.Gauge) []string {
	if len(g.Components) > 0 {
		return g.Components
	}
	return []string{"E11", "E22", "E12"}
}

// Series is a stereo series in progress.
type Series struct {
	p      Params
	ref    *stereo.Reference
	frame  stereo.Frame
	l0, r0 *imageio.Gray
	curve  series.Curve
	last   *Frame
	// static holds the statistics of each static frame (noise floor).
	static []map[string]series.QStat
	// lPrev and rPrev are the last pair added (for incremental
	// tracking); incr is true once auto mode has switched.
	lPrev, rPrev *imageio.Gray
	incr         bool
}

// The switch of auto mode, those of a 2D series (series.Params
// SwitchValid and SwitchZNCC defaults).
const (
	switchValid = 0.9
	switchZNCC  = 0.9
)

// Frame is the full measurement of one frame: the tracked state and its
// surface strain (nil for the reference).
type Frame struct {
	Index   int
	State   *stereo.State
	Surface []stereo.Surface
}

// New matches the reference pair and starts the series with its row.
func New(ctx context.Context, rig *calib.Rig, left, right *imageio.Gray, meta series.FrameMeta, p Params) (*Series, error) {
	if left == nil || right == nil {
		return nil, errors.New("stereo series: the reference pair is missing an image")
	}
	if err := p.Validate(left.W, left.H); err != nil {
		return nil, fmt.Errorf("stereo series: %w", err)
	}
	o, _ := p.Options(left.W, left.H)
	ref, err := stereo.Match(ctx, rig, left, right, o)
	if err != nil {
		return nil, fmt.Errorf("stereo series: reference pair: %w", err)
	}
	if ref.OK() < 3 {
		return nil, fmt.Errorf("stereo series: only %d points of the reference pair were matched in both cameras: check the rig file, the lighting and the depth range", ref.OK())
	}
	fr, err := stereo.SpecimenFrame(ref)
	if err != nil {
		return nil, fmt.Errorf("stereo series: %w", err)
	}
	s := &Series{p: p, ref: ref, frame: fr, l0: left, r0: right}
	s.curve.Params = curveParams(p)
	row, _ := s.row(0, meta, nil, nil)
	s.curve.Rows = append(s.curve.Rows, row)
	return s, nil
}

// Reference returns the matched reference state.
func (s *Series) Reference() *stereo.Reference { return s.ref }

// SpecimenFrame returns the frame of the results (see stereo.SpecimenFrame).
func (s *Series) SpecimenFrame() stereo.Frame { return s.frame }

// Params returns the parameters.
func (s *Series) Params() Params { return s.p }

// Add tracks the next pair (from the reference pair, or from the previous
// pair as Params.Incremental says) and appends its row.
func (s *Series) Add(ctx context.Context, left, right *imageio.Gray, meta series.FrameMeta) (*Frame, series.Summary, error) {
	st, mode, err := s.track(ctx, left, right)
	if err != nil {
		return nil, series.Summary{}, fmt.Errorf("stereo series: frame %d (%s): %w", len(s.curve.Rows), meta.Name, err)
	}
	sf, err := stereo.Strain(s.ref, st, stereo.StrainOptions{Window: s.p.StrainWindow})
	if err != nil {
		return nil, series.Summary{}, fmt.Errorf("stereo series: frame %d: %w", len(s.curve.Rows), err)
	}
	i := len(s.curve.Rows)
	row, q := s.row(i, meta, st, sf)
	row.Mode = mode
	s.curve.Rows = append(s.curve.Rows, row)
	if row.Static {
		s.static = append(s.static, series.StaticStats(q))
	}
	s.last = &Frame{Index: i, State: st, Surface: sf}
	s.lPrev, s.rPrev = left, right
	return s.last, row, nil
}

// track tracks a pair as Params.Incremental says and returns the state
// with its mode.
func (s *Series) track(ctx context.Context, left, right *imageio.Gray) (*stereo.State, string, error) {
	pol := s.p.Incremental
	prev := s.last != nil && s.last.State != nil
	if prev && (pol == series.IncrementalAlways || pol == series.IncrementalAuto && s.incr) {
		st, err := s.fromPrevious(ctx, left, right)
		return st, series.ModeIncremental, err
	}
	st, err := s.ref.Track(ctx, s.l0, s.r0, left, right)
	if err != nil || pol != series.IncrementalAuto || !prev {
		return st, series.ModeDirect, err
	}
	if kept, zncc := s.quality(st); kept >= switchValid && zncc >= switchZNCC {
		return st, series.ModeDirect, nil
	}
	inc, err := s.fromPrevious(ctx, left, right)
	if err != nil {
		return nil, "", err
	}
	s.incr = true
	return inc, series.ModeIncremental, nil
}

// fromPrevious tracks a pair from the previous one.
func (s *Series) fromPrevious(ctx context.Context, left, right *imageio.Gray) (*stereo.State, error) {
	if s.lPrev == nil || s.rPrev == nil {
		return nil, errors.New("incremental tracking needs the images of the previous pair; give them to a restored series with SetPrevious")
	}
	return s.ref.TrackFrom(ctx, s.last.State, s.lPrev, s.rPrev, left, right)
}

// quality returns the fraction of the reference's matched points that st
// keeps and their mean ZNCC.
func (s *Series) quality(st *stereo.State) (kept, zncc float64) {
	n, ok := 0, 0
	for k, p := range s.ref.Points {
		if p.Status != stereo.OK {
			continue
		}
		n++
		if q := st.Points[k]; q.Status == stereo.OK {
			ok++
			zncc += q.ZNCC
		}
	}
	return float64(ok) / float64(max(n, 1)), zncc / float64(max(ok, 1))
}

// NeedsPrevious reports whether the next Add may track from the previous
// pair, whose images a restored series must then be given (SetPrevious).
func (s *Series) NeedsPrevious() bool {
	return s.last != nil && s.last.State != nil && (s.p.Incremental == series.IncrementalAlways || s.p.Incremental == series.IncrementalAuto)
}

// SetPrevious gives a restored series the images of its last pair.
func (s *Series) SetPrevious(left, right *imageio.Gray) { s.lPrev, s.rPrev = left, right }

// Curve returns the curve so far, one row per frame, the reference first,
// with the noise floor of the static frames.
func (s *Series) Curve() series.Curve {
	c := s.curve
	c.Rows = append([]series.Summary(nil), s.curve.Rows...)
	c.Noise = series.NoiseFromFrames(s.static)
	return c
}

// Properties returns the material properties of the curve so far.
func (s *Series) Properties() series.Properties { return s.Curve().Properties() }

// row builds the summary of frame i (st nil: the reference) and returns
// it with the frame's quantities per point (NaN where not measured).
func (s *Series) row(i int, meta series.FrameMeta, st *stereo.State, sf []stereo.Surface) (series.Summary, map[string][]float64) {
	r := series.Summary{Index: i, Name: meta.Name, Time: meta.Time, Load: meta.Load, Mode: series.ModeDirect, Mean: map[string]float64{}}
	if st == nil {
		r.Mode = series.ModeReference
	} else if i <= s.p.StaticFrames {
		r.Static = true
	}
	if meta.Load != nil && s.p.Area > 0 {
		v := *meta.Load / s.p.Area
		r.Stress = &v
	}
	n := len(s.ref.Points)
	ok := make([]bool, n)
	var valid, z int
	var zncc float64
	for k, p := range s.ref.Points {
		if p.Status != stereo.OK {
			continue
		}
		z++
		if st == nil {
			ok[k] = true
			zncc += p.ZNCC
		} else if st.Points[k].Status == stereo.OK {
			ok[k] = true
			zncc += st.Points[k].ZNCC
		}
		if ok[k] {
			valid++
		}
	}
	r.ValidFraction = float64(valid) / float64(max(n, 1))
	r.Tracked = float64(valid) / float64(max(z, 1))
	r.MeanZNCC = zncc / float64(max(valid, 1))
	// Mean displacement (mm, specimen frame) and surface strains.
	q := map[string][]float64{}
	var qok []bool
	for k := range s.ref.Points {
		good := ok[k] && (st == nil || sf[k].OK)
		qok = append(qok, good)
		var d [3]float64
		var m stereoMeasures
		if st != nil && good {
			d = s.frame.Vector(st.Points[k].Disp)
			m = measures(sf[k])
		}
		q["u"] = append(q["u"], d[0])
		q["v"] = append(q["v"], d[1])
		q["w"] = append(q["w"], d[2])
		for name, v := range m.values() {
			q[name] = append(q[name], v)
		}
	}
	for _, name := range []string{"u", "v", "w", "E11", "E22", "E12", "H11", "H22", "H12"} {
		if st == nil {
			r.Mean[name] = 0
			continue
		}
		mean, _, _, _, cnt := series.Stats(q[name], qok)
		if cnt > 0 {
			r.Mean[name] = mean
		}
	}
	// Extensometers: lengths in space.
	for _, e := range s.p.Extensometers {
		r.Extensometers = append(r.Extensometers, s.extensometer(e, st, ok))
	}
	// Gauges: mean surface strains of the points inside.
	for _, g := range s.p.Gauges {
		in := make([]bool, n)
		for k, p := range s.ref.Points {
			in[k] = qok[k] && g.Contains(p.X, p.Y)
		}
		for _, c := range gaugeComponents(g) {
			gr := series.GaugeReading{Gauge: g.Name, Component: c}
			if st == nil {
				for k := range in {
					if in[k] {
						gr.N++
					}
				}
			} else if vals, has := q[c]; has {
				gr.Mean, gr.Std, gr.Min, gr.Max, gr.N = series.Stats(vals, in)
			}
			r.Gauges = append(r.Gauges, gr)
		}
	}
	return r, masked(q, qok)
}

// masked returns q with NaN at the points not ok.
func masked(q map[string][]float64, ok []bool) map[string][]float64 {
	out := make(map[string][]float64, len(q))
	for name, vals := range q {
		m := make([]float64, len(vals))
		for k, v := range vals {
			if ok[k] {
				m[k] = v
			} else {
				m[k] = math.NaN()
			}
		}
		out[name] = m
	}
	return out
}

// stereoMeasures are the surface quantities a gauge can average.
type stereoMeasures struct{ s stereo.Surface }

func measures(s stereo.Surface) stereoMeasures { return stereoMeasures{s} }

func (m stereoMeasures) values() map[string]float64 {
	e, h := m.s.M.E, m.s.M.H
	return map[string]float64{"E11": e[0][0], "E22": e[1][1], "E12": e[0][1], "H11": h[0][0], "H22": h[1][1], "H12": h[0][1],
		"E_max": m.s.M.EMax, "E_min": m.s.M.EMin, "w_normal": m.s.W}
}

// extensometer reads one extensometer: the distance in space between the
// 3D positions of its end points in the reference and in the state st
// (nil: the reference itself).
func (s *Series) extensometer(e series.Extensometer, st *stereo.State, ok []bool) series.ExtReading {
	r := series.ExtReading{Name: e.Name}
	refPos := func(k int) [3]float64 { return s.ref.Points[k].Pos }
	a0, okA := s.positionAt(e.A, ok, refPos)
	b0, okB := s.positionAt(e.B, ok, refPos)
	if !okA || !okB {
		return r
	}
	a1, b1 := a0, b0
	if st != nil {
		defPos := func(k int) [3]float64 { return st.Points[k].Pos }
		a1, okA = s.positionAt(e.A, ok, defPos)
		b1, okB = s.positionAt(e.B, ok, defPos)
		if !okA || !okB {
			return r
		}
	}
	r.L0, r.L = dist(a0, b0), dist(a1, b1)
	if !(r.L0 > 0) {
		return r
	}
	r.Stretch = r.L / r.L0
	r.Eng = r.Stretch - 1
	r.True = math.Log(r.Stretch)
	r.Valid = true
	if st != nil {
		// The std of the strain: the ends' displacement std (per axis,
		// interpolated as the positions are: an upper bound, since the
		// neighbours' errors are correlated) along the extensometer's
		// reference direction, the ends taken as independent (first-order
		// propagation, JCGM 100:2008, 5.1; cross-axis covariances, which
		// the state does not keep, are left out).
		stdOf := func(k int) [3]float64 { return st.Points[k].Std }
		sa, okA := s.positionAt(e.A, ok, stdOf)
		sb, okB := s.positionAt(e.B, ok, stdOf)
		if okA && okB {
			var v float64
			for i := range 3 {
				n := (b0[i] - a0[i]) / r.L0
				v += n * n * (sa[i]*sa[i] + sb[i]*sb[i])
			}
			if sd := math.Sqrt(v) / r.L0; sd > 0 {
				r.EngStd = &sd
			}
		}
	}
	return r
}

func dist(a, b [3]float64) float64 {
	return math.Sqrt((a[0]-b[0])*(a[0]-b[0]) + (a[1]-b[1])*(a[1]-b[1]) + (a[2]-b[2])*(a[2]-b[2]))
}

// positionAt interpolates the 3D position of the material point at the
// left reference pixel q from the grid points marked ok: bilinear when
// the four surrounding points are measured, otherwise the least-squares
// affine fit over the measured points of the surrounding 4×4 block (both
// exact for a plane deformed homogeneously). ok is false with fewer than
// three points near.
func (s *Series) positionAt(q [2]float64, ok []bool, pos func(k int) [3]float64) ([3]float64, bool) {
	g := s.ref.Grid
	fx := (q[0] - float64(g.X0)) / float64(g.Step)
	fy := (q[1] - float64(g.Y0)) / float64(g.Step)
	if !(fx >= -0.5 && fy >= -0.5 && fx <= float64(g.Nx)-0.5 && fy <= float64(g.Ny)-0.5) {
		return [3]float64{}, false
	}
	i0, j0 := int(math.Floor(fx)), int(math.Floor(fy))
	at := func(i, j int) (int, bool) {
		if i < 0 || j < 0 || i >= g.Nx || j >= g.Ny {
			return 0, false
		}
		k := g.Index(i, j)
		return k, ok[k]
	}
	k00, a := at(i0, j0)
	k10, b := at(i0+1, j0)
	k01, c := at(i0, j0+1)
	k11, d := at(i0+1, j0+1)
	var out [3]float64
	if a && b && c && d {
		tx, ty := fx-float64(i0), fy-float64(j0)
		p00, p10, p01, p11 := pos(k00), pos(k10), pos(k01), pos(k11)
		for i := range 3 {
			out[i] = (1-tx)*(1-ty)*p00[i] + tx*(1-ty)*p10[i] + (1-tx)*ty*p01[i] + tx*ty*p11[i]
		}
		return out, true
	}
	var m [3][3]float64
	var rhs [3][3]float64
	n := 0
	for j := j0 - 1; j <= j0+2; j++ {
		for i := i0 - 1; i <= i0+2; i++ {
			k, good := at(i, j)
			if !good {
				continue
			}
			p := [3]float64{1, float64(i) - fx, float64(j) - fy}
			P := pos(k)
			for r := range 3 {
				for c := range 3 {
					m[r][c] += p[r] * p[c]
					rhs[c][r] += p[r] * P[c]
				}
			}
			n++
		}
	}
	if n < 3 {
		return out, false
	}
	for c := range 3 {
		x, good := solve3(m, rhs[c])
		if !good {
			return out, false
		}
		out[c] = x[0]
	}
	return out, true
}

// solve3 solves a·x = b by Cramer's rule; ok is false when a is (nearly)
// singular.
func solve3(a [3][3]float64, b [3]float64) ([3]float64, bool) {
	det := func(m [3][3]float64) float64 {
		return m[0][0]*(m[1][1]*m[2][2]-m[1][2]*m[2][1]) - m[0][1]*(m[1][0]*m[2][2]-m[1][2]*m[2][0]) + m[0][2]*(m[1][0]*m[2][1]-m[1][1]*m[2][0])
	}
	d := det(a)
	scale := math.Abs(a[0][0]*a[1][1]*a[2][2]) + 1e-300
	if math.Abs(d) < 1e-12*scale {
		return [3]float64{}, false
	}
	var x [3]float64
	for c := range 3 {
		m := a
		for r := range 3 {
			m[r][c] = b[r]
		}
		x[c] = det(m) / d
	}
	return x, true
}

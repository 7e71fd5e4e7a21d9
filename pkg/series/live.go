package series

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sync"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
)

// Full-field policies for LiveOptions.Full: which frames of a live series
// also get the full field (every point of the grid, through a Tracker).
const (
	// FullEvery computes the full field of every frame (the default).
	FullEvery = "every"
	// FullEveryN computes it for every N-th frame (LiveOptions.EveryN).
	FullEveryN = "every_n"
	// FullOnRequest computes it only for frames passed to Live.Request.
	FullOnRequest = "on_request"
)

// ModeLive marks a curve row made by the live path alone (no full field
// of that frame yet).
const ModeLive = "live"

// Reasons a live reading is not trusted (LiveReading.Reason).
const (
	// ReasonTooFewValid: fewer than LiveOptions.MinValid of the points the
	// reading needs have a result.
	ReasonTooFewValid = "too_few_valid"
	// ReasonLowZNCC: the mean ZNCC of those points is below
	// LiveOptions.MinZNCC.
	ReasonLowZNCC = "low_zncc"
	// ReasonJump: the value moved more than LiveOptions.MaxJump from the
	// last trusted value of the same reading.
	ReasonJump = "jump"
	// ReasonNoEnd: an extensometer end point could not be located.
	ReasonNoEnd = "no_end_point"
)

// LiveOptions are the settings of a live series. The zero value takes the
// defaults.
type LiveOptions struct {
	// Full is FullEvery (default), FullEveryN or FullOnRequest.
	Full string `json:"full"`
	// EveryN is N for FullEveryN (default 10); frames N, 2N, … get the
	// full field.
	EveryN int `json:"every_n,omitempty"`
	// MinValid is the fraction of a reading's points that must have a
	// result for it to be trusted; default 0.8.
	MinValid float64 `json:"min_valid,omitempty"`
	// MinZNCC is the lowest mean ZNCC of a reading's points for it to be
	// trusted; default 0.9.
	MinZNCC float64 `json:"min_zncc,omitempty"`
	// MaxJump is the largest change of a strain between a frame and the
	// last trusted value of the same reading; default 0.05. A negative
	// value turns the check off.
	MaxJump float64 `json:"max_jump,omitempty"`
	// FullThreads caps the goroutines of the full-field correlation, so
	// that it leaves the other cores to the live path; default 1. Results
	// do not depend on it.
	FullThreads int `json:"full_threads,omitempty"`
}

func (o LiveOptions) withDefaults() LiveOptions {
	if o.Full == "" {
		o.Full = FullEvery
	}
	if o.EveryN == 0 {
		o.EveryN = 10
	}
	if o.MinValid == 0 {
		o.MinValid = 0.8
	}
	if o.MinZNCC == 0 {
		o.MinZNCC = 0.9
	}
	if o.MaxJump == 0 {
		o.MaxJump = 0.05
	}
	if o.FullThreads == 0 {
		o.FullThreads = 1
	}
	return o
}

// Validate reports every problem with o, naming the field.
func (o LiveOptions) Validate() error {
	o = o.withDefaults()
	var errs []error
	switch o.Full {
	case FullEvery, FullEveryN, FullOnRequest:
	default:
		errs = append(errs, fmt.Errorf("live full %q: use %s, %s or %s", o.Full, FullEvery, FullEveryN, FullOnRequest))
	}
	if o.EveryN < 1 {
		errs = append(errs, fmt.Errorf("live every_n %d: use 1 or more", o.EveryN))
	}
	if !(o.MinValid > 0 && o.MinValid <= 1) {
		errs = append(errs, fmt.Errorf("live min_valid %g: use a fraction in (0, 1], e.g. 0.8", o.MinValid))
	}
	if !(o.MinZNCC > -1 && o.MinZNCC <= 1) {
		errs = append(errs, fmt.Errorf("live min_zncc %g: use a value in (-1, 1], e.g. 0.9", o.MinZNCC))
	}
	if !finite(o.MaxJump) {
		errs = append(errs, fmt.Errorf("live max_jump %g: use a strain such as 0.05, or a negative value for no check", o.MaxJump))
	}
	if o.FullThreads < 0 {
		errs = append(errs, fmt.Errorf("live full_threads %d: use 0 (default 1) or more", o.FullThreads))
	}
	return errors.Join(errs...)
}

// LiveReading is one live value of one frame: an extensometer's
// engineering strain, or the mean of one component of a gauge.
type LiveReading struct {
	// Name is the extensometer's or the gauge's name; Component is the
	// gauge component, or "eng" for an extensometer.
	Name      string `json:"name"`
	Component string `json:"component"`
	// Gauge is true for a gauge, false for an extensometer.
	Gauge bool `json:"gauge"`
	// Value is the strain; nil when the reading is not trusted.
	Value *float64 `json:"value"`
	// Std is the predicted standard uncertainty of Value (from the
	// correlation's predicted displacement std; see Live); nil when unknown.
	Std *float64 `json:"std,omitempty"`
	// ValidFraction is the fraction of the reading's points with a result;
	// MeanZNCC their mean ZNCC.
	ValidFraction float64 `json:"valid_fraction"`
	MeanZNCC      float64 `json:"mean_zncc"`
	// Trusted is false when the reading failed a check; Reason says which.
	Trusted bool   `json:"trusted"`
	Reason  string `json:"reason,omitempty"`
}

// LiveValues are the live readings of one frame.
type LiveValues struct {
	// Index is the frame's index in the series (1, 2, …).
	Index int      `json:"index"`
	Name  string   `json:"name,omitempty"`
	Time  *float64 `json:"time_s,omitempty"`
	Load  *float64 `json:"load_N,omitempty"`
	// Readings are the extensometers in order, then each gauge's
	// components in order.
	Readings []LiveReading `json:"readings"`
	// Trusted is true when every reading is.
	Trusted bool `json:"trusted"`
	// Points is the number of points correlated for the frame.
	Points int `json:"points"`
	// Full is true when the frame is due for the full field under the
	// series' policy.
	Full bool `json:"full_field_due"`
}

// patch is a rectangle of lattice indices correlated together.
type patch struct{ i0, j0, i1, j1 int }

// liveState is the live solution at one lattice point.
type liveState struct {
	g     guess
	zncc  float64
	su    float64
	sv    float64
	valid bool
}

// Live is a live series: for each frame it correlates only the grid points
// that the extensometers and gauges need (the 4×4 blocks around each
// extensometer end, the gauge's points and the strain window around them),
// with the direct (total Lagrangian) correlation against the reference,
// starting from the previous frame's solution, in small crops of the
// images. The readings use the same code as the full field (the same
// interpolation of the end displacements, the same strain-window fit), so
// on the same points they agree with it to within the correlation's
// convergence. Each frame can also get its full field, through a Tracker,
// under LiveOptions.Full; the series' curve holds the full-field row of
// such frames and the live row of the others.
//
// Predicted uncertainty: an extensometer's strain std is σ_L/L0 with σ_L
// from the mean predicted displacement std of the points around each end,
// projected on the extensometer's direction; a gauge mean's std is the rms
// of the points' propagated strain std divided by √(N/w²), N points and w
// the strain window side (about one independent value per window). These
// are predictions from image noise; bias (interpolation, out-of-plane
// motion) is not in them.
//
// Live strain is for test control and monitoring; where it matters,
// confirm with a calibrated extensometer (ASTM E83, ISO 9513).
//
// Frame and FullField may run on different goroutines; each must be
// called in frame order.
type Live struct {
	opt LiveOptions
	p   Params
	ref *imageio.Gray
	eng *engine
	lat lattice
	ext []Extensometer // in px
	gs  []Gauge        // in px
	// extPts[e] and gaugePts[g]: patches of the readings.
	extPatch   [][2]patch
	gaugePatch []patch
	margin     int

	mu        sync.Mutex
	st        map[int]liveState
	u, v      []float64 // full-lattice arrays, NaN outside the patches
	valid     []bool
	last      []*float64 // last trusted value per reading
	rows      []Summary
	metas     []FrameMeta
	requested map[int]bool

	full     sync.Mutex
	tr       *Tracker
	lastFull int
}

// NewLive starts a live series on ref (as NewWith) with options lo.
func NewLive(ref *imageio.Gray, meta FrameMeta, p Params, opt Options, lo LiveOptions) (*Live, error) {
	if err := lo.Validate(); err != nil {
		return nil, fmt.Errorf("series: %w", err)
	}
	lo = lo.withDefaults()
	tr, err := NewWith(ref, meta, p, opt)
	if err != nil {
		return nil, err
	}
	full, ok := tr.corr.(*engine)
	if !ok {
		return nil, errors.New("series: live mode needs the production correlator")
	}
	// The live path has its own copy of the options on all cores; the
	// full field runs on FullThreads.
	live := *full
	live.opt.Threads = 0
	full.opt.Threads, full.inc.Threads = lo.FullThreads, lo.FullThreads
	p = tr.st.Params
	if len(p.Extensometers) == 0 && len(p.Gauges) == 0 {
		return nil, errors.New("series: live mode needs at least one extensometer or gauge")
	}
	l := &Live{opt: lo, p: p, ref: ref, eng: &live, lat: live.lat, tr: tr,
		st: map[int]liveState{}, requested: map[int]bool{}}
	n := l.lat.Nx * l.lat.Ny
	l.u, l.v, l.valid = make([]float64, n), make([]float64, n), make([]bool, n)
	for k := range l.u {
		l.u[k], l.v[k] = math.NaN(), math.NaN()
	}
	ls := 1 / p.lengthScale()
	clip := func(i0, j0, i1, j1 int) patch {
		return patch{max(i0, 0), max(j0, 0), min(i1, l.lat.Nx-1), min(j1, l.lat.Ny-1)}
	}
	block := func(x, y float64) patch {
		i := int(math.Floor((x - l.lat.X0) / l.lat.Step))
		j := int(math.Floor((y - l.lat.Y0) / l.lat.Step))
		return clip(i-1, j-1, i+2, j+2)
	}
	for _, e := range p.Extensometers {
		epx := Extensometer{Name: e.Name, A: [2]float64{e.A[0] * ls, e.A[1] * ls}, B: [2]float64{e.B[0] * ls, e.B[1] * ls}}
		l.ext = append(l.ext, epx)
		l.extPatch = append(l.extPatch, [2]patch{block(epx.A[0], epx.A[1]), block(epx.B[0], epx.B[1])})
	}
	h := p.Analysis.StrainWindow / 2
	for _, g := range p.Gauges {
		gpx := g.scaled(ls)
		l.gs = append(l.gs, gpx)
		i0, j0, i1, j1 := l.lat.Nx, l.lat.Ny, -1, -1
		for k := range n {
			X, Y := l.lat.pos(k)
			if gpx.Contains(X, Y) {
				i, j := k%l.lat.Nx, k/l.lat.Nx
				i0, j0, i1, j1 = min(i0, i), min(j0, j), max(i1, i), max(j1, j)
			}
		}
		if i1 < 0 {
			return nil, fmt.Errorf("series: gauge %q holds no grid point (step %g px); enlarge it or reduce the step", g.Name, l.lat.Step)
		}
		l.gaugePatch = append(l.gaugePatch, clip(i0-h, j0-h, i1+h, j1+h))
	}
	for range l.readingNames() {
		l.last = append(l.last, nil)
	}
	// Crop margin: the subset's half-width, the integer search radius
	// (where a point without a usable guess is searched for) and room for
	// the prefilter and the spline's boundary to die out.
	l.margin = live.opt.Subset/2 + max(live.opt.Search, 0) + 16
	l.rows = []Summary{tr.st.Curve[0]}
	l.metas = []FrameMeta{meta}
	return l, nil
}

// readingNames lists the readings in the order of LiveValues.Readings.
func (l *Live) readingNames() []LiveReading {
	var out []LiveReading
	for _, e := range l.ext {
		out = append(out, LiveReading{Name: e.Name, Component: "eng"})
	}
	for _, g := range l.gs {
		for _, c := range g.components() {
			out = append(out, LiveReading{Name: g.Name, Component: c, Gauge: true})
		}
	}
	return out
}

// Params returns the series parameters with defaults filled in.
func (l *Live) Params() Params { return l.p }

// Options returns the live options with defaults filled in.
func (l *Live) Options() LiveOptions { return l.opt }

// Len returns the number of frames given to Frame.
func (l *Live) Len() int {
	l.mu.Lock()
	defer l.mu.Unlock()
	return len(l.rows) - 1
}

// due reports whether frame index gets the full field (l.mu held).
func (l *Live) due(index int) bool {
	switch l.opt.Full {
	case FullEvery:
		return true
	case FullEveryN:
		return index%l.opt.EveryN == 0
	}
	return l.requested[index]
}

// Due reports whether frame index is due for the full field: under the
// policy, or requested.
func (l *Live) Due(index int) bool {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.due(index) || l.requested[index]
}

// Request asks for the full field of frame index (any policy). Frames get
// their full field in order, so the frame must come after the last one
// that has it.
func (l *Live) Request(index int) error {
	l.full.Lock()
	lf := l.lastFull
	l.full.Unlock()
	l.mu.Lock()
	defer l.mu.Unlock()
	switch {
	case index < 1 || index >= len(l.rows):
		return fmt.Errorf("series: frame %d: no such frame (1 to %d)", index, len(l.rows)-1)
	case index <= lf:
		return fmt.Errorf("series: frame %d: full fields are computed in frame order and frame %d already has one; request a later frame", index, lf)
	}
	l.requested[index] = true
	return nil
}

// Frame correlates the live points of the next frame and returns its
// readings. The frame's row enters the curve (as ModeLive until its full
// field replaces it). A cancelled context leaves the series as it was.
func (l *Live) Frame(ctx context.Context, img *imageio.Gray, meta FrameMeta) (LiveValues, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	index := len(l.rows)
	if img == nil || img.W != l.ref.W || img.H != l.ref.H {
		w, h := 0, 0
		if img != nil {
			w, h = img.W, img.H
		}
		return LiveValues{}, fmt.Errorf("frame %q is %d×%d px, reference %d×%d: %w", meta.Name, w, h, l.ref.W, l.ref.H, ErrSize)
	}
	if meta.Time != nil {
		for i := len(l.metas) - 1; i >= 0; i-- {
			if t := l.metas[i].Time; t != nil {
				if !(*meta.Time > *t) {
					return LiveValues{}, fmt.Errorf("frame %q: time %g s is not after the previous frame's %g s; time stamps must increase", meta.Name, *meta.Time, *t)
				}
				break
			}
		}
	}
	var all []patch
	for _, pp := range l.extPatch {
		all = append(all, pp[0], pp[1])
	}
	all = append(all, l.gaugePatch...)
	upd := map[int]liveState{}
	npts := 0
	for _, pa := range all {
		n, err := l.correlate(ctx, img, pa, upd)
		if err != nil {
			return LiveValues{}, fmt.Errorf("frame %d %q (live): %w", index, meta.Name, err)
		}
		npts += n
	}
	// Commit.
	for k, s := range upd {
		l.st[k] = s
		if s.valid {
			l.u[k], l.v[k], l.valid[k] = s.g.U, s.g.V, true
		} else {
			l.u[k], l.v[k], l.valid[k] = math.NaN(), math.NaN(), false
		}
	}
	vals, row, err := l.readings(ctx, index, meta)
	if err != nil {
		return LiveValues{}, fmt.Errorf("frame %d %q (live): %w", index, meta.Name, err)
	}
	vals.Points = npts
	vals.Full = l.due(index)
	meta.Progress = nil
	l.rows = append(l.rows, row)
	l.metas = append(l.metas, meta)
	return vals, nil
}

// correlate runs the points of patch pa in a crop of the reference and
// img, starting from the live state, and stores the results in upd.
func (l *Live) correlate(ctx context.Context, img *imageio.Gray, pa patch, upd map[int]liveState) (int, error) {
	half := float64(l.eng.opt.Subset / 2)
	var (
		idx     []int
		pts     [][2]float64
		gs      [][12]float64
		outside []int
	)
	x0, y0, x1, y1 := math.Inf(1), math.Inf(1), math.Inf(-1), math.Inf(-1)
	for j := pa.j0; j <= pa.j1; j++ {
		for i := pa.i0; i <= pa.i1; i++ {
			k := j*l.lat.Nx + i
			X, Y := l.lat.pos(k)
			xa, ya, xb, yb := int(X-half), int(Y-half), int(X+half), int(Y+half)
			if xa < 0 || ya < 0 || xb >= l.ref.W || yb >= l.ref.H || (l.eng.opt.Mask != nil && !l.eng.opt.Mask.RectInside(xa, ya, xb, yb)) {
				outside = append(outside, k)
				continue
			}
			s, ok := l.st[k]
			if !ok || !s.valid {
				// No earlier solution here: start from zero motion (the
				// reference itself), or a neighbour's in the same patch
				// when the search must reach further.
				s = liveState{g: guess{OK: true}}
				if nb, ok := l.neighbourGuess(k); ok {
					s.g = nb
				}
			}
			var P [12]float64
			P[correlate.U], P[correlate.V] = s.g.U, s.g.V
			P[correlate.Ux], P[correlate.Uy], P[correlate.Vx], P[correlate.Vy] = s.g.Ux, s.g.Uy, s.g.Vx, s.g.Vy
			idx = append(idx, k)
			pts = append(pts, [2]float64{X, Y})
			gs = append(gs, P)
			x0, y0 = math.Min(x0, math.Min(X, X+s.g.U)), math.Min(y0, math.Min(Y, Y+s.g.V))
			x1, y1 = math.Max(x1, math.Max(X, X+s.g.U)), math.Max(y1, math.Max(Y, Y+s.g.V))
		}
	}
	for _, k := range outside {
		upd[k] = liveState{}
	}
	if len(idx) == 0 {
		return 0, nil
	}
	m := float64(l.margin)
	cx0, cy0 := max(int(math.Floor(x0-m)), 0), max(int(math.Floor(y0-m)), 0)
	cx1, cy1 := min(int(math.Ceil(x1+m)), l.ref.W-1), min(int(math.Ceil(y1+m)), l.ref.H-1)
	w, h := cx1-cx0+1, cy1-cy0+1
	rc, dc := l.ref.Sub(cx0, cy0, w, h), img.Sub(cx0, cy0, w, h)
	for n := range pts {
		pts[n][0] -= float64(cx0)
		pts[n][1] -= float64(cy0)
	}
	opt := l.eng.opt
	opt.Mask, opt.Seeds, opt.Start, opt.Progress = nil, nil, nil, nil
	res, err := correlate.RunPoints(ctx, rc, dc, pts, gs, opt)
	if err != nil {
		return 0, err
	}
	if len(res.Points) != len(idx) {
		return 0, fmt.Errorf("correlation returned %d points, want %d", len(res.Points), len(idx))
	}
	for n, k := range idx {
		mt := fromPoint(res.Points[n])
		ok := mt.OK && finite(mt.U, mt.V, mt.Ux, mt.Uy, mt.Vx, mt.Vy)
		s := liveState{zncc: mt.ZNCC, su: mt.StdU, sv: mt.StdV, valid: ok}
		if ok {
			s.g = guess{U: mt.U, V: mt.V, Ux: mt.Ux, Uy: mt.Uy, Vx: mt.Vx, Vy: mt.Vy, OK: true}
		} else if old, had := l.st[k]; had {
			s.g = old.g // keep the last good guess for the next frame
		}
		upd[k] = s
	}
	return len(idx), nil
}

// neighbourGuess returns the solution of the nearest valid live point in
// the same row or column (within 3 grid points), carried to k with its
// gradient.
func (l *Live) neighbourGuess(k int) (guess, bool) {
	i, j := k%l.lat.Nx, k/l.lat.Nx
	for d := 1; d <= 3; d++ {
		for _, o := range [][2]int{{-d, 0}, {d, 0}, {0, -d}, {0, d}} {
			ii, jj := i+o[0], j+o[1]
			if ii < 0 || jj < 0 || ii >= l.lat.Nx || jj >= l.lat.Ny {
				continue
			}
			s, ok := l.st[jj*l.lat.Nx+ii]
			if !ok || !s.valid {
				continue
			}
			dx, dy := -float64(o[0])*l.lat.Step, -float64(o[1])*l.lat.Step
			g := s.g
			g.U += g.Ux*dx + g.Uy*dy
			g.V += g.Vx*dx + g.Vy*dy
			return g, true
		}
	}
	return guess{}, false
}

// readings evaluates the extensometers and gauges on the live solution
// (l.mu held) and returns them with the frame's curve row.
func (l *Live) readings(ctx context.Context, index int, meta FrameMeta) (LiveValues, Summary, error) {
	p := l.p
	vals := LiveValues{Index: index, Name: meta.Name, Time: meta.Time, Load: meta.Load, Trusted: true}
	row := Summary{Index: index, Name: meta.Name, Time: meta.Time, Load: meta.Load, Stress: l.tr.stress(meta.Load),
		Mode: ModeLive, Static: index <= p.StaticFrames, Mean: map[string]float64{}}
	scale := p.outScale()
	var mapping positionMap
	if m := p.Analysis.Mapping(); m != nil {
		mapping = m
	}
	nr := 0
	var allN, allV int
	var allZ float64
	judge := func(r *LiveReading, v float64, nOK, n int, z float64) {
		r.ValidFraction = float64(nOK) / float64(max(n, 1))
		if nOK > 0 {
			r.MeanZNCC = z / float64(nOK)
		}
		allN += n
		allV += nOK
		allZ += z
		switch {
		case r.Reason != "":
		case r.ValidFraction < l.opt.MinValid:
			r.Reason = ReasonTooFewValid
		case r.MeanZNCC < l.opt.MinZNCC:
			r.Reason = ReasonLowZNCC
		case l.opt.MaxJump >= 0 && l.last[nr] != nil && math.Abs(v-*l.last[nr]) > l.opt.MaxJump:
			r.Reason = ReasonJump
		}
		if r.Reason == "" && finite(v) {
			r.Trusted = true
			x := v
			r.Value = &x
			l.last[nr] = &x
		} else {
			vals.Trusted = false
			if r.Reason == "" {
				r.Reason = ReasonTooFewValid
			}
		}
		vals.Readings = append(vals.Readings, *r)
		nr++
	}
	count := func(pa patch, keep func(k int) bool) (nOK, n int, z float64) {
		for j := pa.j0; j <= pa.j1; j++ {
			for i := pa.i0; i <= pa.i1; i++ {
				k := j*l.lat.Nx + i
				if keep != nil && !keep(k) {
					continue
				}
				n++
				if s := l.st[k]; s.valid {
					nOK++
					z += s.zncc
				}
			}
		}
		return nOK, n, z
	}
	for e, epx := range l.ext {
		rd := l.lat.readExtensometer(epx, l.u, l.v, nil, nil, 0, l.valid, scale, mapping)
		r := LiveReading{Name: epx.Name, Component: "eng"}
		var nOK, n int
		var z float64
		var sd [2][2]float64 // per end, std u and v
		for end, pa := range l.extPatch[e] {
			a, b, c := count(pa, nil)
			nOK, n, z = nOK+a, n+b, z+c
			var su, sv float64
			m := 0
			for j := pa.j0; j <= pa.j1; j++ {
				for i := pa.i0; i <= pa.i1; i++ {
					if s := l.st[j*l.lat.Nx+i]; s.valid && s.su > 0 && s.sv > 0 {
						su, sv, m = su+s.su, sv+s.sv, m+1
					}
				}
			}
			if m > 0 {
				sd[end] = [2]float64{su / float64(m), sv / float64(m)}
			}
		}
		if !rd.Valid {
			r.Reason = ReasonNoEnd
		}
		L0 := math.Hypot(epx.B[0]-epx.A[0], epx.B[1]-epx.A[1])
		nx, ny := (epx.B[0]-epx.A[0])/L0, (epx.B[1]-epx.A[1])/L0
		if sd[0][0] > 0 && sd[1][0] > 0 {
			s := extStd(sd[0], sd[1], nx, ny, L0)
			r.Std = &s
		}
		judge(&r, rd.Eng, nOK, n, z)
		if !r.Trusted {
			rd = ExtReading{Name: rd.Name, L0: rd.L0}
		}
		row.Extensometers = append(row.Extensometers, rd)
	}
	for gi, gpx := range l.gs {
		pa := l.gaugePatch[gi]
		sub := lattice{X0: l.lat.X0 + float64(pa.i0)*l.lat.Step, Y0: l.lat.Y0 + float64(pa.j0)*l.lat.Step,
			Step: l.lat.Step, Nx: pa.i1 - pa.i0 + 1, Ny: pa.j1 - pa.j0 + 1}
		n := sub.Nx * sub.Ny
		nan := math.NaN()
		in := results.Input{Grid: sub.grid(), Subset: p.Analysis.Subset,
			U: make([]float64, n), V: make([]float64, n), StdU: make([]float64, n), StdV: make([]float64, n),
			ZNCC: make([]float64, n), Status: make([]string, n)}
		full := make([]int, n)
		hasStd := true
		for q := range n {
			k := (pa.j0+q/sub.Nx)*l.lat.Nx + pa.i0 + q%sub.Nx
			full[q] = k
			s := l.st[k]
			if !s.valid {
				in.U[q], in.V[q], in.StdU[q], in.StdV[q], in.ZNCC[q], in.Status[q] = nan, nan, nan, nan, nan, "not_tracked"
				continue
			}
			in.U[q], in.V[q], in.StdU[q], in.StdV[q], in.ZNCC[q], in.Status[q] = s.g.U, s.g.V, s.su, s.sv, s.zncc, "ok"
			if !(s.su > 0 && s.sv > 0) {
				hasStd = false
			}
		}
		if !hasStd {
			in.StdU, in.StdV = nil, nil
		}
		f, err := results.Build(ctx, in, p.buildOptions())
		if err != nil {
			return LiveValues{}, Summary{}, fmt.Errorf("gauge %q: %w", gpx.Name, err)
		}
		q, status := f.Quantities, f.Status
		inside := make([]bool, n)
		isIn := make(map[int]bool, n)
		for k := range n {
			X, Y := sub.pos(k)
			if gpx.Contains(X, Y) {
				isIn[full[k]] = true
				inside[k] = !math.IsNaN(in.U[k]) && status[k] == "ok"
			}
		}
		nOK, nIn, z := count(pa, func(k int) bool { return isIn[k] })
		win := float64(p.Analysis.StrainWindow * p.Analysis.StrainWindow)
		for _, c := range gpx.components() {
			gr := GaugeReading{Gauge: gpx.Name, Component: c}
			gr.Mean, gr.Std, gr.Min, gr.Max, gr.N = Stats(q[c], inside)
			r := LiveReading{Name: gpx.Name, Component: c, Gauge: true}
			if sq, ok := q["std_"+c]; ok && gr.N > 0 {
				var ss float64
				m := 0
				for k := range sq {
					if inside[k] && finite(sq[k]) {
						ss += sq[k] * sq[k]
						m++
					}
				}
				if m > 0 {
					s := math.Sqrt(ss/float64(m)) / math.Sqrt(math.Max(1, float64(gr.N)/win))
					r.Std = &s
				}
			}
			judge(&r, gr.Mean, nOK, nIn, z)
			if !r.Trusted {
				gr = GaugeReading{Gauge: gpx.Name, Component: c}
			}
			row.Gauges = append(row.Gauges, gr)
		}
	}
	row.ValidFraction = float64(allV) / float64(max(allN, 1))
	row.Tracked = row.ValidFraction
	if allV > 0 {
		row.MeanZNCC = allZ / float64(allV)
	}
	return vals, row, nil
}

// FullField computes the full field of frame index from its image (the
// caller keeps the images: the live series holds none), through the
// series' Tracker, and puts its row into the curve in place of the live
// one. Frames must come in increasing order; frames skipped are never
// computed (the tracker starts each frame from the last one it had).
func (l *Live) FullField(ctx context.Context, index int, img *imageio.Gray) (*Frame, error) {
	l.mu.Lock()
	if index < 1 || index >= len(l.rows) {
		l.mu.Unlock()
		return nil, fmt.Errorf("series: frame %d: no such frame (1 to %d)", index, len(l.rows)-1)
	}
	meta := l.metas[index]
	l.mu.Unlock()

	l.full.Lock()
	defer l.full.Unlock()
	if index <= l.lastFull {
		return nil, fmt.Errorf("series: frame %d: full fields are computed in frame order and frame %d already has one", index, l.lastFull)
	}
	fr, err := l.tr.Add(ctx, img, meta)
	if err != nil {
		return nil, err
	}
	l.lastFull = index
	row := fr.Summary
	row.Index = index
	fr.Summary.Index = index
	l.tr.st.Curve[len(l.tr.st.Curve)-1].Index = index
	l.mu.Lock()
	l.rows[index] = row
	delete(l.requested, index)
	l.mu.Unlock()
	return fr, nil
}

// Tracker returns the full-field tracker (for its State); use it only
// while no FullField call runs.
func (l *Live) Tracker() *Tracker { return l.tr }

// Curve returns the series' curve: each frame's full-field row where it
// has one, its live row otherwise.
func (l *Live) Curve() Curve {
	l.mu.Lock()
	rows := append([]Summary(nil), l.rows...)
	l.mu.Unlock()
	l.full.Lock()
	noise := NoiseFromFrames(l.tr.st.Static)
	rows[0] = l.tr.st.Curve[0] // the tracker adds the reference's image quality
	l.full.Unlock()
	return Curve{Rows: rows, Params: l.p, Noise: noise}
}

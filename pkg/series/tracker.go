package series

import (
	"context"
	"errors"
	"fmt"
	"math"

	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/kinematics"
)

// match is the correlation result at one point: the displacement and its
// gradient there (from the subset shape function), ZNCC and predicted std.
type match struct {
	U, V, Ux, Uy, Vx, Vy float64
	ZNCC                 float64
	StdU, StdV           float64
	OK                   bool
	// Reason is the status name when not OK ("diverged", "low_zncc", …).
	Reason string
}

// guess is an initial guess of the displacement and its gradient at a
// point; OK = false means "no guess, search".
type guess struct {
	U, V, Ux, Uy, Vx, Vy float64
	OK                   bool
}

// correlator is the correlation step the tracker drives. The production
// implementation sits on pkg/correlate; tests may use an exact one.
type correlator interface {
	// grid returns the lattice of material points in the reference image.
	grid() lattice
	// direct correlates the reference with def at every grid point
	// (row-major), starting from the guesses. progress (may be nil) is
	// called as correlate.Options.Progress is.
	direct(ctx context.Context, def *imageio.Gray, start []guess, progress func(done, total int)) ([]match, error)
	// at correlates src with dst at the given points of src (any real
	// coordinates), starting from the guesses; the match is evaluated at
	// exactly those points. progress as for direct.
	at(ctx context.Context, src, dst *imageio.Gray, pts [][2]float64, start []guess, progress func(done, total int)) ([]match, error)
}

// Frame is the result of one frame added to a Tracker.
type Frame struct {
	Summary Summary
	// Grid is the reference grid of material points, px.
	Grid kinematics.Grid
	// Quantities are values on Grid, row-major: u and v (in the series'
	// units, x − X), the names of kinematics.QuantityNames (F, strains,
	// rotation, …), zncc, valid (1/0), and when time stamps allow, the
	// Lagrangian velocity vel_u, vel_v (units/s), acceleration acc_u, acc_v
	// (units/s²) at fixed X and the strain rates rate_E11, rate_E22,
	// rate_E12 (1/s). Invalid points are NaN.
	Quantities map[string][]float64
	// Status per point: "ok" or the reason it has no value.
	Status []string
	// Field is the frame's result field, made by the one field builder
	// (results.Build); Quantities and Status are its maps. FrameField adds
	// the frame's metadata.
	Field *field.Field
}

// Tracker follows the material points of a reference grid through a
// series of frames. It is not safe for concurrent use; Add frames in order.
type Tracker struct {
	ref  *imageio.Gray
	prev *imageio.Gray
	// loadPrev, if not nil, loads prev when it is first needed
	// (RestoreLoading).
	loadPrev func() (*imageio.Gray, error)
	corr     correlator
	st       State
	// solved, if not nil, is the direct correlation of the frame being
	// added, solved ahead (AddSolved).
	solved *Solution
}

// ErrSize is returned by Add when a frame's size differs from the
// reference image's.
var ErrSize = errors.New("frame size differs from the reference image")

// newTracker starts a series on ref with an explicit correlator.
func newTracker(ref *imageio.Gray, meta FrameMeta, p Params, c correlator) (*Tracker, error) {
	if ref == nil || ref.W < 1 || ref.H < 1 {
		return nil, errors.New("series: reference image is empty")
	}
	p = p.withDefaults()
	if err := p.Validate(ref.W, ref.H); err != nil {
		return nil, fmt.Errorf("series parameters: %w", err)
	}
	g := c.grid()
	n := g.Nx * g.Ny
	if n == 0 {
		return nil, errors.New("series: the region of interest holds no grid points; enlarge the ROI or reduce the step")
	}
	t := &Tracker{ref: ref, prev: ref, corr: c}
	t.st = State{Version: stateVersion, Params: p, Grid: g, Points: make([]PointState, n)}
	for j := range g.Ny {
		for i := range g.Nx {
			k := j*g.Nx + i
			x, y := g.X0+float64(i)*g.Step, g.Y0+float64(j)*g.Step
			t.st.Points[k] = PointState{X: x, Y: y, F: [4]float64{1, 0, 0, 1}, Valid: true, ZNCC: 1}
		}
	}
	row := ReferenceRow(meta.Name, p)
	row.Time, row.Load = meta.Time, meta.Load
	row.Stress = t.stress(meta.Load)
	t.st.Curve = []Summary{row}
	zero := make(nfloats, n)
	t.st.History = []Snapshot{{Time: timeOr(meta.Time), HasTime: meta.Time != nil, U: zero, V: zero, E11: zero, E22: zero, E12: zero}}
	return t, nil
}

func timeOr(t *float64) float64 {
	if t == nil {
		return 0
	}
	return *t
}

func (t *Tracker) stress(load *float64) *float64 {
	if load == nil || !(t.st.Params.Area > 0) {
		return nil
	}
	s := *load / t.st.Params.Area
	return &s
}

// Params returns the tracker's parameters with defaults filled in.
func (t *Tracker) Params() Params { return t.st.Params }

// ReferenceRow returns row 0 of a series' curve, the reference itself: no
// motion, every point valid, extensometers at their length and gauges at
// zero strain (p with defaults).
func ReferenceRow(name string, p Params) Summary {
	p = p.withDefaults()
	row := Summary{Index: 0, Name: name, Mode: ModeReference,
		ValidFraction: 1, Tracked: 1, MeanZNCC: 1, Mean: map[string]float64{}}
	for _, name := range MeanNames {
		row.Mean[name] = 0
	}
	for _, e := range p.Extensometers {
		L0 := math.Hypot(e.B[0]-e.A[0], e.B[1]-e.A[1])
		row.Extensometers = append(row.Extensometers, ExtReading{Name: e.Name, L0: L0, L: L0, Stretch: 1, Valid: true})
	}
	for _, gg := range p.Gauges {
		for _, c := range gg.components() {
			v := 0.0
			if c == "F11" || c == "F22" || c == "detF" {
				v = 1
			}
			row.Gauges = append(row.Gauges, GaugeReading{Gauge: gg.Name, Component: c, Mean: v, Min: v, Max: v})
		}
	}
	return row
}

// CurveOf returns the curve a tracker in state st has made so far: the
// one curve of a series, written by the CLI and served by the service.
func CurveOf(st State) Curve {
	return Curve{Rows: append([]Summary(nil), st.Curve...), Params: st.Params, Noise: NoiseFromFrames(st.Static)}
}

// Len returns the number of frames added (the reference not counted).
func (t *Tracker) Len() int { return len(t.st.Curve) - 1 }

// Curve returns the curve so far: one Summary per frame, the reference
// first. The slice is a copy.
func (t *Tracker) Curve() Curve { return CurveOf(t.st) }

// Add correlates the next frame, updates the tracked points and returns the
// frame's results. A cancelled context returns its error and leaves the
// tracker as it was, so the frame can be added again. Frames must have the
// reference's size (ErrSize otherwise).
func (t *Tracker) Add(ctx context.Context, img *imageio.Gray, meta FrameMeta) (*Frame, error) {
	if img == nil || img.W != t.ref.W || img.H != t.ref.H {
		w, h := 0, 0
		if img != nil {
			w, h = img.W, img.H
		}
		return nil, fmt.Errorf("frame %q is %d×%d px, reference %d×%d: %w", meta.Name, w, h, t.ref.W, t.ref.H, ErrSize)
	}
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	p := t.st.Params
	index := len(t.st.Curve)
	if meta.Time != nil {
		last := t.st.History[len(t.st.History)-1]
		if last.HasTime && !(*meta.Time > last.Time) {
			return nil, fmt.Errorf("frame %q: time %g s is not after the previous frame's %g s; time stamps must increase", meta.Name, *meta.Time, last.Time)
		}
	}

	label := meta.Name
	if label == "" {
		label = fmt.Sprintf("frame %d", index)
	}
	fq, qerr := t.frameQuality(img, label)
	if qerr != nil {
		return nil, fmt.Errorf("frame %d %q: %w", index, meta.Name, qerr)
	}

	var (
		pts      []PointState
		mode     string
		err      error
		reacq    int
		returned bool
	)
	prog := &progress{f: meta.Progress}
	switched := t.st.Switched
	incremental := func() {
		mode = ModeIncremental
		if pts, err = t.incremental(ctx, img, prog); err == nil {
			reacq, err = t.reacquire(ctx, img, pts, prog)
		}
	}
	switch {
	case p.Incremental == IncrementalAlways:
		incremental()
	case p.Incremental == IncrementalAuto && switched && p.ReturnDirect && t.solved != nil:
		// Solved ahead, directly from another frame's guess, and good
		// enough to return (AddSolved): the check against the reference
		// is done, and the incremental chain is split here (issue 21).
		pts, mode, switched, returned = t.solved.Points, ModeDirect, false, true
	case p.Incremental == IncrementalAuto && switched:
		incremental()
		if err == nil && p.ReturnDirect {
			// Check against the reference from the composed mapping.
			var d []PointState
			if d, err = t.directStep(ctx, img, pts, prog); err == nil {
				if z, tracked := t.quality(d); z >= p.SwitchZNCC && tracked >= p.SwitchValid {
					pts, mode, switched, returned, reacq = d, ModeDirect, false, true, 0
				}
			}
		}
	default:
		mode = ModeDirect
		if t.solved != nil {
			pts = t.solved.Points
		} else {
			pts, err = t.directStep(ctx, img, t.st.Points, prog)
		}
		if err == nil && p.Incremental == IncrementalAuto && index > 1 {
			z, tracked := t.quality(pts)
			if z < p.SwitchZNCC || tracked < p.SwitchValid {
				switched = true
				incremental()
			}
		}
	}
	if err != nil {
		return nil, fmt.Errorf("frame %d %q (%s): %w", index, meta.Name, mode, err)
	}
	prog.finish()

	fr, snap, err := t.results(ctx, pts, meta, index, mode)
	if err != nil {
		return nil, fmt.Errorf("frame %d %q: %w", index, meta.Name, err)
	}

	// Commit only now, so a cancelled or failed frame leaves no trace.
	if index == 1 {
		t.st.FirstValid = countValid(pts)
		t.st.Initial = make(bits, len(pts))
		for k, q := range pts {
			t.st.Initial[k] = q.Valid
		}
	}
	fr.Summary.Tracked = t.trackedFraction(pts)
	fr.Summary.Quality = fq
	fr.Summary.Reacquired, fr.Summary.ReturnedDirect = reacq, returned
	t.st.Points = pts
	t.st.Switched = switched
	t.st.History = append(t.st.History, snap)
	if len(t.st.History) > keptHistory {
		t.st.History = t.st.History[len(t.st.History)-keptHistory:]
	}
	if fr.Summary.Static {
		t.st.Static = append(t.st.Static, staticStats(fr.Quantities))
	}
	t.st.Curve = append(t.st.Curve, fr.Summary)
	t.prev, t.loadPrev = img, nil
	return fr, nil
}

// previous returns the last frame added, loading it first if the tracker
// was restored with RestoreLoading.
func (t *Tracker) previous() (*imageio.Gray, error) {
	if t.prev == nil && t.loadPrev != nil {
		g, err := t.loadPrev()
		if err != nil {
			return nil, fmt.Errorf("the series' last frame: %w", err)
		}
		if g == nil || g.W != t.ref.W || g.H != t.ref.H {
			return nil, fmt.Errorf("the series' last frame is needed at the reference's size (%d×%d): %w", t.ref.W, t.ref.H, ErrSize)
		}
		t.prev, t.loadPrev = g, nil
	}
	return t.prev, nil
}

func countValid(pts []PointState) int {
	n := 0
	for _, q := range pts {
		if q.Valid {
			n++
		}
	}
	return n
}

func (t *Tracker) trackedFraction(pts []PointState) float64 {
	first := t.st.FirstValid
	if first == 0 {
		first = countValid(pts)
	}
	if first == 0 {
		return 0
	}
	return float64(countValid(pts)) / float64(first)
}

// quality returns the mean ZNCC over valid points and the tracked fraction.
func (t *Tracker) quality(pts []PointState) (zncc, tracked float64) {
	n := 0
	for _, q := range pts {
		if q.Valid {
			zncc += q.ZNCC
			n++
		}
	}
	if n > 0 {
		zncc /= float64(n)
	}
	return zncc, t.trackedFraction(pts)
}

// directStep correlates the reference with img, starting every point from
// its solution in from (the previous frame's, or this frame's composed
// one); points not valid there are reached by propagation.
func (t *Tracker) directStep(ctx context.Context, img *imageio.Gray, from []PointState, prog *progress) ([]PointState, error) {
	return directPoints(ctx, t.corr, t.st.Grid, img, from, prog.pass())
}

// directPoints correlates the reference with img on grid g, starting
// every point valid in from from its solution there; with from nil, the
// correlator's seed search starts the whole grid.
func directPoints(ctx context.Context, c correlator, g lattice, img *imageio.Gray, from []PointState, progress func(done, total int)) ([]PointState, error) {
	var start []guess
	if from != nil {
		start = make([]guess, len(from))
	}
	for k, q := range from {
		if q.Valid {
			X, Y := g.pos(k)
			start[k] = guess{U: q.X - X, V: q.Y - Y, Ux: q.F[0] - 1, Uy: q.F[1], Vx: q.F[2], Vy: q.F[3] - 1, OK: true}
		}
	}
	ms, err := c.direct(ctx, img, start, progress)
	if err != nil {
		return nil, err
	}
	if n := g.Nx * g.Ny; len(ms) != n {
		return nil, fmt.Errorf("correlation returned %d points, want %d", len(ms), n)
	}
	out := make([]PointState, len(ms))
	for k, m := range ms {
		X, Y := g.pos(k)
		out[k] = PointState{X: X + m.U, Y: Y + m.V, F: [4]float64{1 + m.Ux, m.Uy, m.Vx, 1 + m.Vy},
			ZNCC: m.ZNCC, StdU: m.StdU, StdV: m.StdV, Valid: m.OK && finite(m.U, m.V, m.Ux, m.Uy, m.Vx, m.Vy), Reason: m.Reason}
	}
	return out, nil
}

// incremental correlates the previous frame with img at the current
// positions of the valid material points and composes the mappings there:
// x_n = x_{n−1} + Δu(x_{n−1}), F_n = (I + ∇Δu)·F_{n−1}. Uncertainties add
// in quadrature (the increments' errors are independent).
func (t *Tracker) incremental(ctx context.Context, img *imageio.Gray, prog *progress) ([]PointState, error) {
	var (
		idx   []int
		pts   [][2]float64
		start []guess
	)
	h := t.st.History
	for k, q := range t.st.Points {
		if !q.Valid {
			continue
		}
		idx = append(idx, k)
		pts = append(pts, [2]float64{q.X, q.Y})
		// Guess: the previous increment of this same material point.
		gs := guess{OK: true}
		if len(h) >= 2 {
			a, b := h[len(h)-2], h[len(h)-1]
			du, dv := b.U[k]-a.U[k], b.V[k]-a.V[k]
			if finite(du, dv) {
				gs.U, gs.V = du, dv
			}
		}
		start = append(start, gs)
	}
	out := make([]PointState, len(t.st.Points))
	for k, q := range t.st.Points {
		out[k] = q
		out[k].Valid = false
		if q.Valid {
			out[k].Reason = "lost"
		}
	}
	if len(idx) == 0 {
		return out, nil
	}
	prev, err := t.previous()
	if err != nil {
		return nil, err
	}
	ms, err := t.corr.at(ctx, prev, img, pts, start, prog.pass())
	if err != nil {
		return nil, err
	}
	if len(ms) != len(idx) {
		return nil, fmt.Errorf("correlation returned %d points, want %d", len(ms), len(idx))
	}
	for n, k := range idx {
		m, q := ms[n], t.st.Points[k]
		if !m.OK || !finite(m.U, m.V, m.Ux, m.Uy, m.Vx, m.Vy) {
			out[k].ZNCC, out[k].Reason = m.ZNCC, m.Reason
			continue
		}
		inc := kinematics.FromGradient(m.Ux, m.Uy, m.Vx, m.Vy)
		F := inc.Mul(kinematics.Tensor{{q.F[0], q.F[1]}, {q.F[2], q.F[3]}})
		out[k] = PointState{
			X: q.X + m.U, Y: q.Y + m.V,
			F:    [4]float64{F[0][0], F[0][1], F[1][0], F[1][1]},
			ZNCC: m.ZNCC, StdU: math.Hypot(q.StdU, m.StdU), StdV: math.Hypot(q.StdV, m.StdV),
			Valid: true,
		}
	}
	return out, nil
}

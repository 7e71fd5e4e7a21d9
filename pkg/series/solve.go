package series

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"

	"github.com/mottledic/mottle/pkg/imageio"
)

// Solution is the direct correlation of one frame with the reference,
// computed on its own, before the frames ahead of it are added: in direct
// mode a frame is correlated with the reference, so the order of the
// frames only supplies its initial guess, and frames can be solved side
// by side. AddSolved adds the frame with its solution, in frame order.
type Solution struct {
	// Grid is the lattice of material points the solution is on.
	Grid lattice `json:"grid"`
	// Points are the solved points, row-major on Grid.
	Points []PointState `json:"points"`
}

// SolvesAhead reports whether the frames of a series with parameters p
// may be solved ahead (Solve): every mode but incremental-always starts a
// frame with a direct correlation.
func SolvesAhead(p Params) bool { return p.withDefaults().Incremental != IncrementalAlways }

// SplitsAtReturn reports whether the frames of a series with parameters p
// that has gone incremental may still be solved ahead: in auto mode with
// ReturnDirect, a frame whose direct solution is good enough returns to
// direct correlation (AddSolved), so the incremental chain before it and
// the frames after it run side by side.
func SplitsAtReturn(p Params) bool {
	p = p.withDefaults()
	return p.Incremental == IncrementalAuto && p.ReturnDirect
}

// Solve correlates img with the reference ref of a series with parameters
// p (and ROI mask opt.Mask), starting every point from guess, the solution
// of a nearby frame already solved (nil: the seed search of a first
// frame). progress is called as in FrameMeta. The result is the same
// whatever the order frames are solved in; it differs from a frame added
// in sequence (Add) only through the guess, within the correlation's
// convergence tolerance.
func Solve(ctx context.Context, ref, img *imageio.Gray, p Params, opt Options, guess *Solution, progress func(done, total int)) (*Solution, error) {
	if ref == nil || img == nil || img.W != ref.W || img.H != ref.H {
		return nil, fmt.Errorf("solve frame: the frame and the reference differ in size: %w", ErrSize)
	}
	p = p.withDefaults()
	var pm *packedMask
	if opt.Mask != nil {
		var err error
		if pm, err = packMask(opt.Mask, ref.W, ref.H); err != nil {
			return nil, fmt.Errorf("solve frame: %w", err)
		}
	}
	var lat *lattice
	if guess != nil {
		lat = &guess.Grid
	}
	c, err := newCorrelatorOn(ref, p, pm, lat)
	if err != nil {
		return nil, err
	}
	return solve(ctx, c, img, guess, progress)
}

func solve(ctx context.Context, c correlator, img *imageio.Gray, guess *Solution, progress func(done, total int)) (*Solution, error) {
	g := c.grid()
	var from []PointState
	if guess != nil {
		if guess.Grid != g || len(guess.Points) != g.Nx*g.Ny {
			return nil, errors.New("solve frame: the guess is on another grid; solve without one")
		}
		from = guess.Points
	}
	pts, err := directPoints(ctx, c, g, img, from, progress)
	if err != nil {
		return nil, err
	}
	return &Solution{Grid: g, Points: pts}, nil
}

// AddSolved adds the next frame as Add does, taking its direct
// correlation from sol when sol is good enough: on the tracker's grid,
// with a mean ZNCC and a tracked fraction at least the switch thresholds.
// Before an auto-mode series has switched (and in direct mode) the frame
// is then not correlated again; after it switched, with ReturnDirect, the
// frame returns to direct correlation with sol, as Add's check against
// the reference would have it, without its incremental step. Otherwise
// (no solution, a frame that did not converge well from its guess) the
// frame is computed exactly as Add does.
//
// The bound against frames added in sequence is the one of Solve; for a
// frame that returns to direct it holds when the sequential run returns
// at that frame too (Add checks the direct correlation from the composed
// incremental mapping, which may fall on the other side of the
// thresholds when the frame is near them).
func (t *Tracker) AddSolved(ctx context.Context, img *imageio.Gray, meta FrameMeta, sol *Solution) (*Frame, error) {
	if sol != nil && !t.accepts(sol) {
		sol = nil
	}
	t.solved = sol
	defer func() { t.solved = nil }()
	return t.Add(ctx, img, meta)
}

// accepts reports whether sol may stand for the direct correlation of the
// next frame.
func (t *Tracker) accepts(sol *Solution) bool {
	if sol.Grid != t.st.Grid || len(sol.Points) != len(t.st.Points) {
		return false
	}
	p := t.st.Params
	z, tracked := t.quality(sol.Points)
	return z >= p.SwitchZNCC && tracked >= p.SwitchValid
}

// Solution returns the tracked points of the state as a solution, the
// guess for frames solved ahead of the next one (nil before the first
// frame, when the points are the reference grid itself).
func (s State) Solution() *Solution {
	if len(s.Curve) < 2 || len(s.Points) == 0 {
		return nil
	}
	return &Solution{Grid: s.Grid, Points: s.Points}
}

// SolutionOfState returns State.Solution of the state encoded in b (the
// binary form of StateBinary, or the JSON of StateJSON or of a State).
// Of the JSON it reads only the grid, the points and the number of curve
// rows: a frame solved ahead needs no more of the state than its guess,
// and the history and curve rows are most of it.
func SolutionOfState(b []byte) (*Solution, error) {
	if IsBinaryState(b) {
		st, err := DecodeState(b)
		if err != nil {
			return nil, err
		}
		return st.Solution(), nil
	}
	var s struct {
		Grid   lattice           `json:"grid"`
		Points []PointState      `json:"points"`
		Curve  []json.RawMessage `json:"curve"`
	}
	if err := json.Unmarshal(b, &s); err != nil {
		return nil, fmt.Errorf("series state: %w", err)
	}
	return State{Grid: s.Grid, Points: s.Points, Curve: make([]Summary, len(s.Curve))}.Solution(), nil
}

// MaxExtrapolation is the most, in px, that Extrapolate moves a point's
// guess beyond its position in the nearer frame: the farther it would
// go, the more a turn of the loading (a hold, a reversal) makes the guess
// worse than the nearer frame's own position, which IC-GN converges from
// today. Within it, the guess stays where IC-GN converges to the same
// optimum as from the sequential run's guess (solveTol; tested with a
// ramp, a hold and a reversal in TestSolveExtrapolated).
const MaxExtrapolation = 2.0

// Extrapolate returns the guess for a frame solved while the frame before
// it is still being solved (issue 21): from the solutions a and b of two
// earlier frames, b the nearer, each point moves on along its last step,
// x = x_b + r·(x_b − x_a) and likewise F, where r is the distance from b
// to the frame over the distance from a to b (in frame indices, or in
// time). The step added is limited to MaxExtrapolation px (F's in the
// same proportion); a point not valid in both keeps b's state. It returns
// b when a is on another grid or r is not a positive finite number.
func Extrapolate(a, b *Solution, r float64) *Solution {
	if a == nil || a.Grid != b.Grid || len(a.Points) != len(b.Points) || !(r > 0) || math.IsInf(r, 0) {
		return b
	}
	out := &Solution{Grid: b.Grid, Points: append([]PointState(nil), b.Points...)}
	for k := range out.Points {
		p, q := a.Points[k], &out.Points[k]
		if !p.Valid || !q.Valid {
			continue
		}
		dx, dy := r*(q.X-p.X), r*(q.Y-p.Y)
		s := 1.0
		if d := math.Hypot(dx, dy); d > MaxExtrapolation {
			s = MaxExtrapolation / d
		}
		if !finite(dx, dy) {
			continue
		}
		var f [4]float64
		for i := range f {
			f[i] = q.F[i] + s*r*(q.F[i]-p.F[i])
		}
		if !finite(f[0], f[1], f[2], f[3]) {
			continue
		}
		q.X, q.Y, q.F = q.X+s*dx, q.Y+s*dy, f
	}
	return out
}

package series

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
	"reflect"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// solveTol is the bound this package guarantees between a direct-mode
// series whose frames were solved ahead from other guesses and the same
// series added in sequence: each curve mean of displacement within 2e-3 px
// and of strain within 2e-5. IC-GN stops when its update moves the subset
// by less than Tolerance (1e-4 px by default), so two starts converge to
// the same optimum within a few tolerances at each point (Pan, Li & Tong
// 2013, "Fast, robust and accurate digital image correlation calculation
// without redundant computations", Exp. Mech. 53:1277, for the stopping
// rule; from memory); the bound keeps a margin over the 1e-4-level
// differences this test measures.
const (
	solveTolU = 2e-3
	solveTolE = 2e-5
)

// solveSeries renders a direct-mode series of a strip stretched 0.4 % more
// and shifted 0.7 px more per frame, with the exact renderer of pkg/synth.
func solveSeries(t *testing.T) (*imageio.Gray, []*imageio.Gray, Params) {
	t.Helper()
	const W, H = 128, 96
	var ms []synth.Motion
	for n := 1; n <= 6; n++ {
		e := 0.004 * float64(n)
		ms = append(ms, synth.Affine{F: [2][2]float64{{1 + e, 0}, {0, 1 - 0.3*e}}, CX: W / 2, CY: H / 2, U: 0.7 * float64(n), V: -0.2 * float64(n)})
	}
	ref, imgs := renderFrames(t, W, H, 4, ms, 0)
	p := Defaults()
	p.Analysis.Subset, p.Analysis.Step = 21, 8
	p.Incremental = IncrementalNever
	p.Extensometers = []Extensometer{{Name: "axial", A: [2]float64{24, 48}, B: [2]float64{104, 48}}}
	return ref, imgs, p
}

// TestSolveAhead checks the parallel rule of a direct-mode series (issue
// 21): frames solved with the previous frame's solution as their guess
// and added in order give the very curve of a sequential run; frames
// solved from another frame's solution (two back, or a seed search for
// the first two) give it within solveTol; and a solution that did not
// converge is set aside and the frame correlated as Add does.
func TestSolveAhead(t *testing.T) {
	ref, imgs, p := solveSeries(t)
	ctx := context.Background()
	seq, err := New(ref, FrameMeta{Name: "ref"}, p)
	if err != nil {
		t.Fatal(err)
	}
	initial := &Solution{Grid: seq.st.Grid, Points: append([]PointState(nil), seq.st.Points...)}
	for _, im := range imgs {
		if _, err := seq.Add(ctx, im, FrameMeta{}); err != nil {
			t.Fatal(err)
		}
	}
	want := seq.Curve()

	run := func(guess func(k int, sols []*Solution) *Solution, spoil int) Curve {
		t.Helper()
		sols := make([]*Solution, len(imgs))
		for k := range imgs {
			var err error
			if sols[k], err = Solve(ctx, ref, imgs[k], p, Options{}, guess(k, sols), nil); err != nil {
				t.Fatal(err)
			}
		}
		if spoil >= 0 {
			bad := &Solution{Grid: sols[spoil].Grid, Points: make([]PointState, len(sols[spoil].Points))}
			sols[spoil] = bad // no point valid: the frame must be correlated again
		}
		tr, err := New(ref, FrameMeta{Name: "ref"}, p)
		if err != nil {
			t.Fatal(err)
		}
		for k, im := range imgs {
			if _, err := tr.AddSolved(ctx, im, FrameMeta{}, sols[k]); err != nil {
				t.Fatal(err)
			}
		}
		return tr.Curve()
	}

	// The guess of a sequential run: the previous frame's solution.
	chain := func(k int, sols []*Solution) *Solution {
		if k == 0 {
			return initial
		}
		return sols[k-1]
	}
	if got := run(chain, -1); !reflect.DeepEqual(got.Rows, want.Rows) {
		for i := range got.Rows {
			if !reflect.DeepEqual(got.Rows[i], want.Rows[i]) {
				t.Errorf("frame %d: %+v\nsequential %+v", i, got.Rows[i], want.Rows[i])
				break
			}
		}
		t.Errorf("frames solved ahead from the previous frame's solution: the curve differs from the sequential run's")
	}
	if got := run(chain, 3); !reflect.DeepEqual(got.Rows, want.Rows) {
		t.Errorf("a frame whose solution did not converge: the curve differs from the sequential run's")
	}

	// Guesses two frames back, seed searches for frames 1 and 2.
	skip := func(k int, sols []*Solution) *Solution {
		if k < 2 {
			return nil
		}
		return sols[k-2]
	}
	got := run(skip, -1)
	worstU, worstE := 0.0, 0.0
	for i := range want.Rows {
		for _, q := range MeanNames {
			d := math.Abs(got.Rows[i].Mean[q] - want.Rows[i].Mean[q])
			switch q {
			case "u", "v":
				worstU = max(worstU, d)
			default:
				if len(q) == 3 && q[0] == 'E' {
					worstE = max(worstE, d)
				}
			}
		}
		if got.Rows[i].Mode != want.Rows[i].Mode {
			t.Errorf("frame %d: mode %s, sequential %s", i, got.Rows[i].Mode, want.Rows[i].Mode)
		}
	}
	t.Logf("other guesses: worst curve difference %.2g px (u, v), %.2g (E)", worstU, worstE)
	if worstU > solveTolU || worstE > solveTolE {
		t.Errorf("other guesses: the curve differs from the sequential run's by %.2g px, %.2g strain; bound %g, %g", worstU, worstE, solveTolU, solveTolE)
	}
}

// TestRestoreGridCheck checks that Restore, which takes the grid from the
// state instead of correlating the reference with itself, refuses a
// reference the saved grid does not fit, and that a restored tracker adds
// a frame exactly as the tracker it was saved from.
func TestRestoreGridCheck(t *testing.T) {
	ref, imgs, p := solveSeries(t)
	ctx := context.Background()
	tr, err := New(ref, FrameMeta{Name: "ref"}, p)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := tr.Add(ctx, imgs[0], FrameMeta{}); err != nil {
		t.Fatal(err)
	}
	st := tr.State()
	small := imageio.NewGray(64, 64)
	if _, err := Restore(small, small, st); err == nil {
		t.Errorf("restored a 128×96 px series' state on a 64×64 px reference")
	}
	rt, err := Restore(ref, imgs[0], st)
	if err != nil {
		t.Fatal(err)
	}
	a, err := tr.Add(ctx, imgs[1], FrameMeta{})
	if err != nil {
		t.Fatal(err)
	}
	b, err := rt.Add(ctx, imgs[1], FrameMeta{})
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(a.Summary, b.Summary) {
		t.Errorf("restored tracker: %+v\nsaved tracker: %+v", b.Summary, a.Summary)
	}
}

// TestStateJSON checks that StateJSON writes the very bytes of encoding
// the copy State makes, with the thread count left out.
func TestStateJSON(t *testing.T) {
	ref, imgs, p := solveSeries(t)
	p.Analysis.Threads = 2
	tr, err := New(ref, FrameMeta{Name: "ref"}, p)
	if err != nil {
		t.Fatal(err)
	}
	for _, im := range imgs[:3] {
		if _, err := tr.Add(context.Background(), im, FrameMeta{}); err != nil {
			t.Fatal(err)
		}
	}
	st := tr.State()
	st.Params.Analysis.Threads = 0
	want, err := json.Marshal(st)
	if err != nil {
		t.Fatal(err)
	}
	got, err := tr.StateJSON()
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got, want) {
		t.Errorf("StateJSON differs from encoding State(): %d and %d bytes", len(got), len(want))
	}
	if tr.Params().Analysis.Threads != 2 {
		t.Errorf("StateJSON changed the tracker's thread count to %d", tr.Params().Analysis.Threads)
	}
}

// counted counts the correlations of a tracker's correlator.
type counted struct {
	correlator
	n int
}

func (c *counted) direct(ctx context.Context, def *imageio.Gray, start []guess, progress func(done, total int)) ([]match, error) {
	c.n++
	return c.correlator.direct(ctx, def, start, progress)
}

func (c *counted) at(ctx context.Context, src, dst *imageio.Gray, pts [][2]float64, start []guess, progress func(done, total int)) ([]match, error) {
	c.n++
	return c.correlator.at(ctx, src, dst, pts, start, progress)
}

// TestSolveAheadReturn checks the split of an incremental chain at a frame
// that returns to direct correlation (issue 21) on the occlusion scenario
// in auto mode with ReturnDirect: frame 3 is partly blanked out, so the
// series goes incremental there, and frame 4 returns to direct. Every
// frame solved ahead (from the solution two frames back, a seed search
// for the first two) and added in order: frame 3's poor solution is set
// aside and the frame computed as in sequence (it goes incremental, from
// points within solveTol of the sequential ones); frame 4 returns
// to direct with its solution and no correlation at all in its turn, so
// the frames after it need nothing of the chain before it but its state;
// every row has the sequential run's mode and return flag and its means
// within solveTol.
func TestSolveAheadReturn(t *testing.T) {
	ref, imgs, _, p := occlusionSeries(t)
	p.Incremental, p.ReturnDirect = IncrementalAuto, true
	if !SplitsAtReturn(p) || !SolvesAhead(p) {
		t.Fatal("an auto-mode series with ReturnDirect does not solve ahead after it switched")
	}
	ctx := context.Background()
	seq, err := New(ref, FrameMeta{}, p)
	if err != nil {
		t.Fatal(err)
	}
	for _, im := range imgs {
		if _, err := seq.Add(ctx, im, FrameMeta{}); err != nil {
			t.Fatal(err)
		}
	}
	want := seq.Curve()
	if r := want.Rows[occFrame]; r.Mode != ModeIncremental {
		t.Fatalf("sequential frame %d: mode %s, want incremental (the scenario changed)", occFrame, r.Mode)
	}
	if r := want.Rows[occFrame+1]; !r.ReturnedDirect {
		t.Fatalf("sequential frame %d did not return to direct (the scenario changed)", occFrame+1)
	}

	sols := make([]*Solution, len(imgs))
	for k := range imgs {
		var g *Solution
		if k >= 2 {
			g = sols[k-2]
		}
		if sols[k], err = Solve(ctx, ref, imgs[k], p, Options{}, g, nil); err != nil {
			t.Fatal(err)
		}
	}
	tr, err := New(ref, FrameMeta{}, p)
	if err != nil {
		t.Fatal(err)
	}
	c := &counted{correlator: tr.corr}
	tr.corr = c
	for k, im := range imgs {
		before := c.n
		fr, err := tr.AddSolved(ctx, im, FrameMeta{}, sols[k])
		if err != nil {
			t.Fatal(err)
		}
		if index := k + 1; index == occFrame+1 && c.n != before {
			t.Errorf("frame %d returned to direct with %d correlations in its turn, want none (its solution)", index, c.n-before)
		}
		if k+1 == occFrame && !fr.Summary.ReturnedDirect && fr.Summary.Mode == ModeIncremental && c.n == before {
			t.Errorf("frame %d went incremental without correlating", k+1)
		}
	}
	got := tr.Curve()
	for i := range want.Rows {
		g, w := got.Rows[i], want.Rows[i]
		if g.Mode != w.Mode || g.ReturnedDirect != w.ReturnedDirect {
			t.Errorf("frame %d: mode %s returned %v, sequential %s %v", i, g.Mode, g.ReturnedDirect, w.Mode, w.ReturnedDirect)
		}
		for _, q := range MeanNames {
			bound := solveTolE
			if q == "u" || q == "v" {
				bound = solveTolU
			}
			if d := math.Abs(g.Mean[q] - w.Mean[q]); !(d <= bound) {
				t.Errorf("frame %d %s: %g, sequential %g (bound %g)", i, q, g.Mean[q], w.Mean[q], bound)
			}
		}
	}
}

// TestSolutionOfState checks that the guess read from a state's JSON
// alone is State.Solution of the whole decoded state: nil before a frame
// is added and the tracked points after.
func TestSolutionOfState(t *testing.T) {
	ref, imgs, p := solveSeries(t)
	tr, err := New(ref, FrameMeta{Name: "ref"}, p)
	if err != nil {
		t.Fatal(err)
	}
	for k := 0; k <= 2; k++ {
		if k > 0 {
			if _, err := tr.Add(context.Background(), imgs[k-1], FrameMeta{}); err != nil {
				t.Fatal(err)
			}
		}
		b, err := tr.StateJSON()
		if err != nil {
			t.Fatal(err)
		}
		var st State
		if err := json.Unmarshal(b, &st); err != nil {
			t.Fatal(err)
		}
		got, err := SolutionOfState(b)
		if err != nil {
			t.Fatal(err)
		}
		if want := st.Solution(); !reflect.DeepEqual(got, want) || (k > 0) != (got != nil) {
			t.Errorf("after %d frames: the guess from the state's JSON %v differs from State.Solution %v", k, got != nil, want != nil)
		}
	}
	if _, err := SolutionOfState([]byte(`{"points": 3}`)); err == nil {
		t.Error("a state whose points are not a list gave a guess")
	}
}

// TestSolveExtrapolated checks the guess of a frame solved while the one
// before it is still being solved (Extrapolate, issue 21) on a series that
// ramps (1.2 px and 0.4 % more per frame), holds, and reverses at the
// same rate: each frame from the third on is solved from the solutions
// two and three frames back, extrapolated (r = 2), and the frames added
// in order give the sequential run's curve within solveTol, with every
// solution good enough to be used. On the ramp the extrapolated guess is
// nearer the frame's solution than the solution two frames back, and no
// guess moves a point more than MaxExtrapolation beyond it.
func TestSolveExtrapolated(t *testing.T) {
	const W, H = 128, 96
	offsets := []float64{1, 2, 3, 4, 5, 5, 5, 4, 3, 2} // in steps of 1.2 px and 0.4 %
	var ms []synth.Motion
	for _, o := range offsets {
		e := 0.004 * o
		ms = append(ms, synth.Affine{F: [2][2]float64{{1 + e, 0}, {0, 1 - 0.3*e}}, CX: W / 2, CY: H / 2, U: 1.2 * o, V: -0.3 * o})
	}
	ref, imgs := renderFrames(t, W, H, 4, ms, 0)
	p := Defaults()
	p.Analysis.Subset, p.Analysis.Step = 21, 8
	p.Incremental = IncrementalNever
	ctx := context.Background()
	seq, err := New(ref, FrameMeta{Name: "ref"}, p)
	if err != nil {
		t.Fatal(err)
	}
	initial := &Solution{Grid: seq.st.Grid, Points: append([]PointState(nil), seq.st.Points...)}
	for _, im := range imgs {
		if _, err := seq.Add(ctx, im, FrameMeta{}); err != nil {
			t.Fatal(err)
		}
	}
	want := seq.Curve()

	meanDist := func(a, b *Solution) float64 {
		s, n := 0.0, 0
		for k, q := range a.Points {
			if r := b.Points[k]; q.Valid && r.Valid {
				s += math.Hypot(q.X-r.X, q.Y-r.Y)
				n++
			}
		}
		return s / float64(n)
	}
	sols := make([]*Solution, len(imgs))
	for k := range imgs {
		guess := initial
		var back, before *Solution
		switch {
		case k == 1:
			guess = sols[0]
		case k >= 2:
			back, before = sols[k-2], initial
			if k >= 3 {
				before = sols[k-3]
			}
			guess = Extrapolate(before, back, 2)
			for i, q := range guess.Points {
				if b := back.Points[i]; math.Hypot(q.X-b.X, q.Y-b.Y) > MaxExtrapolation+1e-12 {
					t.Fatalf("frame %d point %d: the guess moves %.3g px beyond the frame two back, limit %g", k+1, i, math.Hypot(q.X-b.X, q.Y-b.Y), MaxExtrapolation)
				}
			}
		}
		if sols[k], err = Solve(ctx, ref, imgs[k], p, Options{}, guess, nil); err != nil {
			t.Fatal(err)
		}
		if k >= 2 && k <= 4 { // the ramp
			if e, b := meanDist(guess, sols[k]), meanDist(back, sols[k]); !(e < b) {
				t.Errorf("frame %d on the ramp: the extrapolated guess is %.3g px from the solution, the frame two back %.3g", k+1, e, b)
			}
		}
	}
	tr, err := New(ref, FrameMeta{Name: "ref"}, p)
	if err != nil {
		t.Fatal(err)
	}
	for k, im := range imgs {
		if !tr.accepts(sols[k]) {
			t.Fatalf("frame %d: the solution is not good enough to be used: the test checks nothing", k+1)
		}
		if _, err := tr.AddSolved(ctx, im, FrameMeta{}, sols[k]); err != nil {
			t.Fatal(err)
		}
	}
	got := tr.Curve()
	worstU, worstE := 0.0, 0.0
	for i := range want.Rows {
		for _, q := range MeanNames {
			d := math.Abs(got.Rows[i].Mean[q] - want.Rows[i].Mean[q])
			switch {
			case q == "u" || q == "v":
				worstU = max(worstU, d)
			case len(q) == 3 && q[0] == 'E':
				worstE = max(worstE, d)
			}
		}
	}
	t.Logf("extrapolated guesses: worst curve difference %.2g px (u, v), %.2g (E)", worstU, worstE)
	if worstU > solveTolU || worstE > solveTolE {
		t.Errorf("extrapolated guesses: the curve differs from the sequential run's by %.2g px, %.2g strain; bound %g, %g", worstU, worstE, solveTolU, solveTolE)
	}
}

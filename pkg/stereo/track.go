package stereo

import (
	"context"
	"errors"
	"math"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/imageio"
)

// StatePoint is a material point in a deformed state.
type StatePoint struct {
	// XL, YL and XR, YR are its positions in the left and right deformed
	// images, px.
	XL, YL, XR, YR float64
	// Pos is its 3D position and Disp = Pos − reference Pos its
	// displacement (U, V, W), mm, left camera frame; Std the std of Disp
	// per axis (see advance).
	Pos, Disp, Std [3]float64
	// Cov holds the covariances of Disp between the axes, xy, xz and yz,
	// mm² (triangulation's error ellipsoid is long along the depth).
	Cov [3]float64
	// ZNCC is the lower of the two tracking matches; Gap the optimal
	// correction of the deformed pair, px.
	ZNCC, Gap float64
	Status    Status
	// Match is the 2D status of the match that failed.
	Match correlate.Status
}

// State is one deformed state of a stereo series.
type State struct {
	Points []StatePoint
}

// OK returns the number of points with status OK.
func (s *State) OK() int {
	n := 0
	for _, p := range s.Points {
		if p.Status == OK {
			n++
		}
	}
	return n
}

// Track follows every reference point into a deformed pair: the left
// subsets from the left reference to the left deformed image, the right
// subsets (at the points' right reference positions) from the right
// reference to the right deformed image, each seeded by correlate's
// integer search every SeedSpacing px and propagated as in Match; then the
// deformed pair is triangulated. leftRef and rightRef must be the images
// Match was given. It returns an error for images of the wrong size.
func (r *Reference) Track(ctx context.Context, leftRef, rightRef, leftDef, rightDef *imageio.Gray) (*State, error) {
	rig := r.tri.Rig()
	if err := checkPair(rig, leftRef, rightRef, "reference pair"); err != nil {
		return nil, err
	}
	if err := checkPair(rig, leftDef, rightDef, "deformed pair"); err != nil {
		return nil, err
	}
	co := r.Options.Correlate
	co.Seeds, co.Start, co.Progress = nil, nil, nil
	n := len(r.Points)
	pl := make([][2]float64, n)
	pr := make([][2]float64, n)
	var idx []int
	for k, p := range r.Points {
		pl[k] = [2]float64{p.X, p.Y}
		pr[k] = [2]float64{p.XR, p.YR}
		if p.Status == OK {
			idx = append(idx, k)
		} else {
			pr[k] = pl[k]
		}
	}
	lt, rt, err := r.follow(ctx, pl, pr, idx, leftRef, rightRef, leftDef, rightDef, co)
	if err != nil {
		return nil, err
	}
	st := &State{Points: make([]StatePoint, n)}
	for k, p := range r.Points {
		q := &st.Points[k]
		q.Status, q.Match = p.Status, p.Match
		if p.Status != OK {
			continue
		}
		r.advance(q, p, lt[k], rt[k], [4]float64{p.X, p.Y, p.XR, p.YR}, nil)
	}
	return st, nil
}

// follow correlates the left points pl from lFrom into lTo and the right
// points pr from rFrom into rTo, at the points idx, seeded by correlate's
// integer search and propagated as in Match; co's mask belongs to the left
// image lFrom.
func (r *Reference) follow(ctx context.Context, pl, pr [][2]float64, idx []int, lFrom, rFrom, lTo, rTo *imageio.Gray, co correlate.Options) (lt, rt []correlate.Point, err error) {
	if lt, err = matchAll(ctx, lFrom, lTo, pl, idx, r.Grid, nil, co, r.Options.SeedSpacing); err != nil {
		return nil, nil, err
	}
	cr := co
	cr.Mask = nil // the mask belongs to the left image
	if rt, err = matchAll(ctx, rFrom, rTo, pr, idx, r.Grid, nil, cr, r.Options.SeedSpacing); err != nil {
		return nil, nil, err
	}
	return lt, rt, nil
}

// advance sets q from the left and right matches a and b of reference
// point p, found at the image positions from = (xl, yl, xr, yr): the new
// positions, the triangulated position and the displacement from the
// reference. The displacement's covariance is the triangulated one of
// the two tracking matches, plus that of prev (the state q starts from,
// nil for the reference). The stereo match's error in the right
// reference position (p.StdMatch) is not added: the right subset follows
// the material the match found, so that error stands in the reference
// and in the deformed position alike and cancels in the displacement
// (JCGM 100:2008, 5.2, correlated inputs; TestDisplacementStd measures the
// predicted std within 5 % of the scatter).
func (r *Reference) advance(q *StatePoint, p Point, a, b correlate.Point, from [4]float64, prev *StatePoint) {
	q.ZNCC = math.Min(a.ZNCC, b.ZNCC)
	if a.Status != correlate.OK {
		q.Status, q.Match = LeftTrack, a.Status
		return
	}
	if b.Status != correlate.OK {
		q.Status, q.Match = RightTrack, b.Status
		return
	}
	q.XL, q.YL = from[0]+a.P[correlate.U], from[1]+a.P[correlate.V]
	q.XR, q.YR = from[2]+b.P[correlate.U], from[3]+b.P[correlate.V]
	sl := math.Hypot(a.StdU, a.StdV) / math.Sqrt2
	sr := math.Hypot(b.StdU, b.StdV) / math.Sqrt2
	t, c, s := triangulate(r.tri, q.XL, q.YL, q.XR, q.YR, sl, sr, r.Options.MaxGap)
	q.Pos, q.Gap, q.Status = t.X, t.Gap, s
	if s != OK {
		return
	}
	for i := range 3 {
		q.Disp[i] = q.Pos[i] - p.Pos[i]
		v := c[i][i]
		if prev != nil {
			v += prev.Std[i] * prev.Std[i]
		}
		q.Std[i] = math.Sqrt(v)
	}
	q.Cov = [3]float64{c[0][1], c[0][2], c[1][2]}
	if prev != nil {
		for i := range 3 {
			q.Cov[i] += prev.Cov[i]
		}
	}
}

// TrackFrom follows the points of prev, the state of the pair lPrev,
// rPrev, into the pair lDef, rDef: incremental tracking, for motions and
// strains too large to find from the reference pair. Each camera's
// subsets are square around the points' positions in the previous pair
// (the updated reference subsets of incremental correlation), found by
// correlate's integer search and propagation as in Track, and the
// positions advance by the increments; the new pair is triangulated and
// the displacement taken from the reference as in Track. Points lost in
// prev stay lost. The displacement's std adds each increment's to prev's
// in quadrature, as if the errors of successive increments were
// independent and accumulated as a random walk (common practice for
// incremental correlation). It is a bound from above: the image noise of
// one pair enters two successive increments with opposite signs, and on
// static pairs these terms telescope, so that the scatter after k
// increments stays that of one (TestDisplacementStd: the prediction 1.3–1.4×
// the scatter at the second pair, 1.6–1.8× at the third); the bound is
// kept because interpolation bias and the reshaped subsets of a deforming
// specimen do not telescope.
func (r *Reference) TrackFrom(ctx context.Context, prev *State, lPrev, rPrev, lDef, rDef *imageio.Gray) (*State, error) {
	rig := r.tri.Rig()
	if prev == nil || len(prev.Points) != len(r.Points) {
		return nil, errors.New("stereo: incremental tracking needs the state of the previous pair, with a point for each reference point")
	}
	if err := checkPair(rig, lPrev, rPrev, "previous pair"); err != nil {
		return nil, err
	}
	if err := checkPair(rig, lDef, rDef, "deformed pair"); err != nil {
		return nil, err
	}
	co := r.Options.Correlate
	co.Seeds, co.Start, co.Progress = nil, nil, nil
	co.Mask = nil // the points are chosen; the mask is of the left reference image
	n := len(r.Points)
	pl := make([][2]float64, n)
	pr := make([][2]float64, n)
	var idx []int
	for k, p := range r.Points {
		q := prev.Points[k]
		pl[k], pr[k] = [2]float64{p.X, p.Y}, [2]float64{p.X, p.Y}
		if q.Status == OK {
			pl[k], pr[k] = [2]float64{q.XL, q.YL}, [2]float64{q.XR, q.YR}
			idx = append(idx, k)
		}
	}
	lt, rt, err := r.follow(ctx, pl, pr, idx, lPrev, rPrev, lDef, rDef, co)
	if err != nil {
		return nil, err
	}
	st := &State{Points: make([]StatePoint, n)}
	for k, p := range r.Points {
		q, was := &st.Points[k], prev.Points[k]
		q.Status, q.Match = was.Status, was.Match
		if was.Status != OK {
			continue
		}
		r.advance(q, p, lt[k], rt[k], [4]float64{was.XL, was.YL, was.XR, was.YR}, &was)
	}
	return st, nil
}

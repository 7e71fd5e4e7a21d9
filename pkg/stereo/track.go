package stereo

import (
	"context"
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
	// per axis (the reference and deformed positions taken as
	// independent).
	Pos, Disp, Std [3]float64
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
	lt, err := matchAll(ctx, leftRef, leftDef, pl, idx, r.Grid, nil, co, r.Options.SeedSpacing)
	if err != nil {
		return nil, err
	}
	cr := co
	cr.Mask = nil // the mask belongs to the left image
	rt, err := matchAll(ctx, rightRef, rightDef, pr, idx, r.Grid, nil, cr, r.Options.SeedSpacing)
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
		a, b := lt[k], rt[k]
		q.ZNCC = math.Min(a.ZNCC, b.ZNCC)
		if a.Status != correlate.OK {
			q.Status, q.Match = LeftTrack, a.Status
			continue
		}
		if b.Status != correlate.OK {
			q.Status, q.Match = RightTrack, b.Status
			continue
		}
		q.XL, q.YL = p.X+a.P[correlate.U], p.Y+a.P[correlate.V]
		q.XR, q.YR = p.XR+b.P[correlate.U], p.YR+b.P[correlate.V]
		sl := math.Hypot(a.StdU, a.StdV) / math.Sqrt2
		sr := math.Hypot(math.Hypot(b.StdU, b.StdV)/math.Sqrt2, p.StdMatch)
		t, c, s := triangulate(r.tri, q.XL, q.YL, q.XR, q.YR, sl, sr, r.Options.MaxGap)
		q.Pos, q.Gap, q.Status = t.X, t.Gap, s
		if s != OK {
			continue
		}
		for i := range 3 {
			q.Disp[i] = q.Pos[i] - p.Pos[i]
			q.Std[i] = math.Sqrt(c[i][i] + p.Std[i]*p.Std[i])
		}
	}
	return st, nil
}

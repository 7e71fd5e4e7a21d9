package stereo

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strconv"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/spline"
)

// Status says whether a point was measured in 3D and, if not, why.
type Status uint8

const (
	// OK: matched in both cameras and triangulated.
	OK Status = iota
	// StereoMatch: the left subset was not found in the right reference
	// image (Point.Match tells the 2D reason).
	StereoMatch
	// LeftTrack: not found in the left deformed image.
	LeftTrack
	// RightTrack: not found in the right deformed image.
	RightTrack
	// RaysApart: the two image points are not consistent with the rig
	// (longer optimal correction than Options.MaxGap): a false match or a
	// rig file that does not fit the cameras.
	RaysApart
	// Behind: triangulated behind a camera.
	Behind
	// NoRay: the lens distortion could not be removed at the point.
	NoRay
)

var statusNames = [...]string{"ok", "stereo_match", "left_track", "right_track", "rays_apart", "behind_camera", "no_ray"}

// String returns the status name used in result files.
func (s Status) String() string {
	if int(s) < len(statusNames) {
		return statusNames[s]
	}
	return "Status(" + strconv.Itoa(int(s)) + ")"
}

// MarshalText encodes the status by its name.
func (s Status) MarshalText() ([]byte, error) {
	if int(s) >= len(statusNames) {
		return nil, fmt.Errorf("stereo: unknown status %d", int(s))
	}
	return []byte(statusNames[s]), nil
}

// Point is a material point of the reference state.
type Point struct {
	// X, Y is the left reference position (the subset centre), px.
	X, Y float64
	// XR, YR is where it was found in the right reference image, px.
	XR, YR float64
	// P is the shape function of the left–right match.
	P [12]float64
	// Pos is the 3D position in the left camera's frame, mm; Std its
	// standard deviation per axis, from the match std.
	Pos, Std [3]float64
	// ZNCC of the left–right match; Gap the optimal correction, px.
	ZNCC, Gap float64
	// StdMatch is the predicted std of the right position, px.
	StdMatch float64
	Status   Status
	// Match is the 2D status of the match that failed (correlate.OK when
	// Status is OK or the failure came later).
	Match correlate.Status
}

// Reference is the stereo reference state: the shape.
type Reference struct {
	Grid   correlate.Grid
	Points []Point
	// Options are the options used, defaults filled in.
	Options Options
	tri     *Triangulator
	w, h    int
}

// Triangulator returns the triangulator of the reference's rig.
func (r *Reference) Triangulator() *Triangulator { return r.tri }

// OK returns the number of points with status OK.
func (r *Reference) OK() int {
	n := 0
	for _, p := range r.Points {
		if p.Status == OK {
			n++
		}
	}
	return n
}

// checkPair returns an error if the images of a pair differ in size from
// each other or from the rig.
func checkPair(rig *calib.Rig, l, r *imageio.Gray, what string) error {
	if l == nil || r == nil || l.W == 0 || r.W == 0 {
		return fmt.Errorf("stereo: %s: an image is missing or empty", what)
	}
	if err := rig.Check(l.W, l.H, r.W, r.H); err != nil {
		return fmt.Errorf("stereo: %s: %w", what, err)
	}
	return nil
}

// grid lays the lattice of subset centres over the left image as
// correlate.Run does: the mask's bounding box (the whole image without a
// mask), kept the interpolation margin inside the image.
func grid(w, h int, o correlate.Options) (correlate.Grid, error) {
	m := o.Subset / 2
	bx0, by0, bx1, by1 := 0, 0, w, h
	if o.Mask != nil {
		bx0, by0, bx1, by1 = o.Mask.Bounds()
	}
	e := 2
	if o.Interp == spline.Quintic {
		e = 3
	}
	bx0, by0 = max(bx0, e), max(by0, e)
	bx1, by1 = min(bx1, w-e), min(by1, h-e)
	g := correlate.Grid{X0: bx0 + m, Y0: by0 + m, Step: o.Step}
	if bx1-1-m < g.X0 || by1-1-m < g.Y0 {
		return g, fmt.Errorf("stereo: the region of interest (%d×%d px) is smaller than the %d px subset", bx1-bx0, by1-by0, o.Subset)
	}
	g.Nx = (bx1-1-m-g.X0)/o.Step + 1
	g.Ny = (by1-1-m-g.Y0)/o.Step + 1
	return g, nil
}

// Match finds every left reference subset in the right reference image and
// triangulates it: the reference shape. Seed points (Options.SeedSpacing
// apart) are searched along their epipolar line between MinDepth and
// MaxDepth by ZNCC and refined by IC-GN; every other point starts from the
// shape function of the nearest seed, then failed points are retried from
// their accepted neighbours. It returns an error for unusable input
// (images of different sizes, or not of the rig's size; bad options);
// points that cannot be measured keep a Status.
func Match(ctx context.Context, rig *calib.Rig, left, right *imageio.Gray, o Options) (*Reference, error) {
	tri, err := NewTriangulator(rig)
	if err != nil {
		return nil, err
	}
	if err := checkPair(rig, left, right, "reference pair"); err != nil {
		return nil, err
	}
	if err := o.Validate(); err != nil {
		return nil, err
	}
	o = o.withDefaults(rig)
	co := o.Correlate
	co.Seeds, co.Start, co.Progress = nil, nil, nil
	cf := co
	cf.Interp = max(cf.Interp, spline.Cubic)
	if cf.Subset == 0 {
		cf.Subset = correlate.DefaultSubset
	}
	if cf.Step == 0 {
		cf.Step = correlate.DefaultStep
	}
	g, err := grid(left.W, left.H, cf)
	if err != nil {
		return nil, err
	}
	n := g.Len()
	pts := make([][2]float64, n)
	for j := range g.Ny {
		for i := range g.Nx {
			x, y := g.At(i, j)
			pts[g.Index(i, j)] = [2]float64{float64(x), float64(y)}
		}
	}
	es := newEpiSearch(tri, left, right, cf.Subset/2, o.MinDepth, o.MaxDepth)
	seed := func(k int) ([12]float64, bool) {
		xr, yr, ok := es.search(pts[k][0], pts[k][1])
		var p [12]float64
		p[correlate.U], p[correlate.V] = xr-pts[k][0], yr-pts[k][1]
		return p, ok
	}
	all := make([]int, n)
	for k := range all {
		all[k] = k
	}
	res, err := matchAll(ctx, left, right, pts, all, g, seed, co, o.SeedSpacing)
	if err != nil {
		return nil, err
	}
	ref := &Reference{Grid: g, Points: make([]Point, n), Options: o, tri: tri, w: left.W, h: left.H}
	for k, q := range res {
		p := &ref.Points[k]
		p.X, p.Y, p.P, p.ZNCC = pts[k][0], pts[k][1], q.P, q.ZNCC
		if q.Status != correlate.OK {
			p.Status, p.Match = StereoMatch, q.Status
			continue
		}
		p.XR, p.YR = p.X+q.P[correlate.U], p.Y+q.P[correlate.V]
		p.StdMatch = math.Hypot(q.StdU, q.StdV) / math.Sqrt2
		t, c, st := triangulate(tri, p.X, p.Y, p.XR, p.YR, 0, p.StdMatch, o.MaxGap)
		p.Pos, p.Gap, p.Status = t.X, t.Gap, st
		for i := range 3 {
			p.Std[i] = math.Sqrt(c[i][i])
		}
	}
	return ref, nil
}

// triangulate triangulates one pair and classifies the outcome; c is the
// covariance of the position from the image std sl, sr.
func triangulate(tri *Triangulator, xl, yl, xr, yr, sl, sr, maxGap float64) (Point3, [3][3]float64, Status) {
	t, err := tri.Triangulate(xl, yl, xr, yr, maxGap)
	switch {
	case errors.Is(err, ErrRaysApart):
		return t, [3][3]float64{}, RaysApart
	case errors.Is(err, ErrBehind), errors.Is(err, ErrParallel):
		return t, [3][3]float64{}, Behind
	case err != nil:
		return t, [3][3]float64{}, NoRay
	}
	c, err := tri.Cov(xl, yl, xr, yr, sl, sr)
	if err != nil {
		return t, c, NoRay
	}
	return t, c, OK
}

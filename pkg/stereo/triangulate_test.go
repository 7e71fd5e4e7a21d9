package stereo

import (
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/mottledic/mottle/internal/figures"
)

// TestTriangulateExact: points projected by the exact cameras of the bench
// triangulate back to themselves (the linear method is exact for a
// consistent pair; Hartley & Zisserman 2003, §12.2), and the optimal
// correction of a perturbed pair satisfies the epipolar constraint and is
// no longer than the perturbation (it is the nearest consistent pair;
// Hartley & Sturm 1997).
func TestTriangulateExact(t *testing.T) {
	l, _, rig := bench(1024, 768)
	tr, err := NewTriangulator(rig)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 2))
	var worst, worstEpi float64
	for range 200 {
		P := toLeft(l, [3]float64{rng.Float64()*100 - 50, rng.Float64()*70 - 35, rng.Float64()*20 - 10})
		pl, pr, ok := tr.Project(P)
		if !ok {
			t.Fatal("point behind the bench")
		}
		q, err := tr.Triangulate(pl[0], pl[1], pr[0], pr[1], 1e-6)
		if err != nil {
			t.Fatal(err)
		}
		worst = math.Max(worst, math.Sqrt(sq(q.X[0]-P[0])+sq(q.X[1]-P[1])+sq(q.X[2]-P[2])))
		ul, ur, _ := tr.Undistort(pl[0], pl[1], pr[0], pr[1])
		dl := [2]float64{ul[0] + rng.NormFloat64()*0.3, ul[1] + rng.NormFloat64()*0.3}
		dr := [2]float64{ur[0] + rng.NormFloat64()*0.3, ur[1] + rng.NormFloat64()*0.3}
		cl, cr, d2 := tr.Optimal(dl, dr)
		F := tr.Fundamental()
		xr := [3]float64{cr[0], cr[1], 1}
		Fx := mulv(F, [3]float64{cl[0], cl[1], 1})
		// Distance of the corrected right point to its epipolar line.
		epi := math.Abs(xr[0]*Fx[0]+xr[1]*Fx[1]+xr[2]*Fx[2]) / math.Hypot(Fx[0], Fx[1])
		worstEpi = math.Max(worstEpi, epi)
		pert := sq(dl[0]-ul[0]) + sq(dl[1]-ul[1]) + sq(dr[0]-ur[0]) + sq(dr[1]-ur[1])
		if d2 > pert*(1+1e-9) {
			t.Errorf("optimal correction %.4g px² is longer than the perturbation %.4g px²", d2, pert)
		}
	}
	t.Logf("exact pairs: worst 3D error %.2e mm; corrected pairs: worst epipolar distance %.2e px", worst, worstEpi)
	if worst > 1e-8 {
		t.Errorf("exact pairs triangulate %.2e mm from the truth", worst)
	}
	if worstEpi > 1e-8 {
		t.Errorf("corrected pairs lie up to %.2e px off their epipolar lines", worstEpi)
	}
}

// TestTriangulateBad: rays that do not meet, and points behind a camera,
// are errors a caller can tell apart, never a number.
func TestTriangulateBad(t *testing.T) {
	l, _, rig := bench(1024, 768)
	tr, _ := NewTriangulator(rig)
	pl, pr, _ := tr.Project(toLeft(l, [3]float64{10, 5, 0}))
	if _, err := tr.Triangulate(pl[0], pl[1], pr[0], pr[1]+25, 2); !errors.Is(err, ErrRaysApart) {
		t.Errorf("right point 25 px off its epipolar line: error %v, want ErrRaysApart", err)
	}
	// A point behind both cameras projects to valid-looking pixels.
	P := [3]float64{0, 0, -500}
	xl := rig.Left.Fx*P[0]/P[2] + rig.Left.Cx
	yl := rig.Left.Fy*P[1]/P[2] + rig.Left.Cy
	var q [3]float64
	for i := range 3 {
		q[i] = rig.R[i][0]*P[0] + rig.R[i][1]*P[1] + rig.R[i][2]*P[2] + rig.T[i]
	}
	xr := rig.Right.Fx*q[0]/q[2] + rig.Right.Cx
	yr := rig.Right.Fy*q[1]/q[2] + rig.Right.Cy
	ul, ur := [2]float64{xl, yl}, [2]float64{xr, yr}
	X, err := tr.Linear(ul, ur)
	if err != nil {
		t.Fatal(err)
	}
	if X[2] > 0 {
		t.Fatalf("the test point should triangulate behind the cameras, got %v", X)
	}
	dl0, dl1 := distortPx(rig.Left.Fx, rig.Left.Fy, rig.Left.Cx, rig.Left.Cy, func(x, y float64) (float64, float64) { return rig.Left.Distort(x, y) }, xl, yl)
	dr0, dr1 := distortPx(rig.Right.Fx, rig.Right.Fy, rig.Right.Cx, rig.Right.Cy, func(x, y float64) (float64, float64) { return rig.Right.Distort(x, y) }, xr, yr)
	if _, err := tr.Triangulate(dl0, dl1, dr0, dr1, 2); !errors.Is(err, ErrBehind) {
		t.Errorf("point behind the cameras: error %v, want ErrBehind", err)
	}
	if _, err := NewTriangulator(nil); err == nil {
		t.Error("nil rig: want an error")
	}
	bad := *rig
	bad.T = [3]float64{}
	if _, err := NewTriangulator(&bad); err == nil {
		t.Error("zero baseline: want an error")
	}
}

// distortPx returns the distorted pixel of the undistorted pixel (x, y).
func distortPx(fx, fy, cx, cy float64, d func(x, y float64) (float64, float64), x, y float64) (float64, float64) {
	a, b := d((x-cx)/fx, (y-cy)/fy)
	return fx*a + cx, fy*b + cy
}

// TestTriangulateOpenCV cross-checks against OpenCV 4.6 (Debian's
// python3-opencv) cv2.triangulatePoints with our projection matrices. On
// noisy undistorted pairs (0.2 px) against our linear method, and on the
// optimally corrected pairs against our Triangulate, the 3D points must
// agree to 1e-6 of the working distance (500 mm); and on the noisy pairs
// our optimal triangulation must be no further from the truth, in RMS,
// than the linear one, within 0.1 % (Hartley & Sturm 1997: the linear methods are not
// optimal under image noise).
func TestTriangulateOpenCV(t *testing.T) {
	l, _, rig := bench(1024, 768)
	tr, _ := NewTriangulator(rig)
	rng := rand.New(rand.NewPCG(3, 4))
	type tri struct {
		P1    [3][4]float64 `json:"P1"`
		P2    [3][4]float64 `json:"P2"`
		Left  [][2]float64  `json:"left"`
		Right [][2]float64  `json:"right"`
	}
	var raw, cor tri
	raw.P1, raw.P2 = tr.Projections()
	cor.P1, cor.P2 = raw.P1, raw.P2
	var ours, oursCor, truth [][3]float64
	for range 100 {
		P := toLeft(l, [3]float64{rng.Float64()*100 - 50, rng.Float64()*70 - 35, rng.Float64()*20 - 10})
		truth = append(truth, P)
		pl, pr, _ := tr.Project(P)
		ul, ur, _ := tr.Undistort(pl[0], pl[1], pr[0], pr[1])
		for k := range 2 {
			ul[k] += 0.2 * rng.NormFloat64()
			ur[k] += 0.2 * rng.NormFloat64()
		}
		X, err := tr.Linear(ul, ur)
		if err != nil {
			t.Fatal(err)
		}
		ours = append(ours, X)
		raw.Left, raw.Right = append(raw.Left, ul), append(raw.Right, ur)
		cl, cr, _ := tr.Optimal(ul, ur)
		cor.Left, cor.Right = append(cor.Left, cl), append(cor.Right, cr)
		Xc, err := tr.Linear(cl, cr)
		if err != nil {
			t.Fatal(err)
		}
		oursCor = append(oursCor, Xc)
	}
	for _, c := range []struct {
		name string
		req  tri
		ours [][3]float64
	}{{"noisy pairs", raw, ours}, {"corrected pairs", cor, oursCor}} {
		var cv struct {
			Version     string
			Triangulate [][3]float64
		}
		runRef(t, map[string]any{"triangulate": c.req}, &cv)
		var worst float64
		for k, X := range c.ours {
			Y := cv.Triangulate[k]
			worst = math.Max(worst, math.Sqrt(sq(X[0]-Y[0])+sq(X[1]-Y[1])+sq(X[2]-Y[2])))
		}
		t.Logf("%s: OpenCV %s triangulatePoints differs by up to %.2e mm (%.2e of 500 mm)", c.name, cv.Version, worst, worst/500)
		if c.name == "noisy pairs" {
			var eo, ec float64
			for k, X := range oursCor {
				Y, P := cv.Triangulate[k], truth[k]
				eo += sq(X[0]-P[0]) + sq(X[1]-P[1]) + sq(X[2]-P[2])
				ec += sq(Y[0]-P[0]) + sq(Y[1]-P[1]) + sq(Y[2]-P[2])
			}
			eo, ec = math.Sqrt(eo/float64(len(truth))), math.Sqrt(ec/float64(len(truth)))
			t.Logf("noisy pairs: RMS 3D error, ours (optimal) %.5f mm, OpenCV linear %.5f mm", eo, ec)
			if eo > ec*1.001 {
				t.Errorf("noisy pairs: our optimal triangulation (RMS %.5f mm) is further from the truth than OpenCV's linear (%.5f mm)", eo, ec)
			}
		}
		figures.Check(t, "stereo/opencv/triangulate/"+strings.Fields(c.name)[0], worst/500)
		if worst > 1e-6*500 {
			t.Errorf("%s: ours and OpenCV's triangulation differ by %.3g mm, more than 1e-6 of the working distance", c.name, worst)
		}
	}
}

package stereo

import (
	"context"
	"math"
	"testing"

	"gonum.org/v1/gonum/mat"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/synth"
)

// stats returns the mean and the RMS of v.
func stats(v []float64) (mean, rms float64) {
	for _, x := range v {
		mean += x
		rms += x * x
	}
	n := float64(max(len(v), 1))
	return mean / n, math.Sqrt(rms / n)
}

// TestOutOfPlaneFigure moves the plane 1 mm toward the bench (along its
// normal). The measured displacement must be within 0.005 mm of the truth
// (mean and RMS of the error length), and the false surface strain at
// most 1e-4 (mean and RMS of each Green–Lagrange component). Beside it:
// the false strain 2D correlation of the left camera alone reports, about
// w/Z = 1/500 = 2e-3 (the pinhole magnification change; common practice,
// Sutton, Yan, Tiwari, Schreier & Orteu 2008, "The effect of out-of-plane
// motion on 2D and 3D digital image correlation measurements", Opt. Lasers
// Eng. 46:746).
func TestOutOfPlaneFigure(t *testing.T) {
	lc, _, rig := bench(figW, figH)
	ref0 := synth.Placement{Shape: synth.Plane{}}
	moved := synth.Placement{Shape: synth.Plane{}, Pose: synth.Pose{T: [3]float64{0, 0, 1}}}
	l0, r0 := cachedPair(t, "plane", ref0, 1)
	l1, r1 := cachedPair(t, "plane+1mm", moved, 3)
	ctx := context.Background()
	ref, err := Match(ctx, rig, l0, r0, figOptions())
	if err != nil {
		t.Fatal(err)
	}
	st, err := ref.Track(ctx, l0, r0, l1, r1)
	if err != nil {
		t.Fatal(err)
	}
	truth := mulv(lc.Pose.R, [3]float64{0, 0, 1}) // world +z in the left frame
	var errLen, ws []float64
	for _, p := range st.Points {
		if p.Status == OK {
			errLen = append(errLen, math.Sqrt(sq(p.Disp[0]-truth[0])+sq(p.Disp[1]-truth[1])+sq(p.Disp[2]-truth[2])))
		}
	}
	sf, err := Strain(ref, st, StrainOptions{})
	if err != nil {
		t.Fatal(err)
	}
	var e11, e22, e12 []float64
	for _, s := range sf {
		if s.OK {
			e11 = append(e11, s.M.E[0][0])
			e22 = append(e22, s.M.E[1][1])
			e12 = append(e12, s.M.E[0][1])
			ws = append(ws, s.W)
		}
	}
	me, re := stats(errLen)
	mw, _ := stats(ws)
	t.Logf("1 mm out of plane: %d of %d points; displacement error mean %.5f mm, RMS %.5f mm; W mean %.5f mm", len(errLen), len(st.Points), me, re, mw)
	if len(errLen) < len(st.Points)*8/10 || len(e11) < len(errLen)*8/10 {
		t.Errorf("only %d points tracked, %d with strain", len(errLen), len(e11))
	}
	if me > 0.005 || re > 0.005 || math.Abs(mw-1) > 0.005 {
		t.Errorf("displacement error mean %.5f, RMS %.5f mm, W %.5f mm: want within 0.005 mm of 1 mm", me, re, mw)
	}
	for _, c := range []struct {
		name string
		v    []float64
	}{{"E11", e11}, {"E22", e22}, {"E12", e12}} {
		m, r := stats(c.v)
		t.Logf("false surface strain %s: mean %.2e, RMS %.2e", c.name, m, r)
		if math.Abs(m) > 1e-4 || r > 1e-4 {
			t.Errorf("false surface strain %s: mean %.2e, RMS %.2e: want at most 1e-4", c.name, m, r)
		}
	}
	// 2D correlation of the left camera alone.
	res, err := correlate.Run(ctx, l0, l1, correlate.Options{Subset: 31, Step: 24})
	if err != nil {
		t.Fatal(err)
	}
	ux, vy := planeFit(res)
	t.Logf("2D correlation of the left camera: false strain exx %.2e, eyy %.2e (w/Z = %.2e)", ux, vy, 1/500.0)
	if !(ux > 1e-3 && vy > 1e-3) {
		t.Errorf("2D false strain %.2e, %.2e: expected about 2e-3 (the test scene is not what it claims)", ux, vy)
	}
}

// planeFit returns ∂u/∂x and ∂v/∂y of the least-squares plane through the
// accepted displacements of a 2D result.
func planeFit(res *correlate.Result) (ux, vy float64) {
	var rows [][3]float64
	var us, vs []float64
	for _, p := range res.Points {
		if p.Status == correlate.OK {
			rows = append(rows, [3]float64{1, p.X, p.Y})
			us = append(us, p.P[correlate.U])
			vs = append(vs, p.P[correlate.V])
		}
	}
	A := mat.NewDense(len(rows), 3, nil)
	for i, r := range rows {
		A.SetRow(i, r[:])
	}
	var a, b mat.VecDense
	_ = a.SolveVec(A, mat.NewVecDense(len(us), us))
	_ = b.SolveVec(A, mat.NewVecDense(len(vs), vs))
	return a.AtVec(1), b.AtVec(2)
}

// TestTiltedStretchFigure stretches a plane tilted 20° about the vertical
// by 0.5 % along its tilted direction (s): the surface Green–Lagrange
// strain is then E_ss = (1.005² − 1)/2 = 5.0125e-3 and zero otherwise
// (closed form). Principal strains must be within 1e-4 of it (mean over
// the points, and RMS of the error).
func TestTiltedStretchFigure(t *testing.T) {
	_, _, rig := bench(figW, figH)
	tilt := synth.PoseFromAngles(0, 20*math.Pi/180, 0, [3]float64{})
	p0 := synth.Placement{Shape: synth.Plane{}, Pose: tilt}
	p1 := synth.Placement{Shape: synth.Plane{}, Pose: tilt, Motion: synth.Affine{F: [2][2]float64{{1.005, 0}, {0, 1}}}}
	l0, r0 := cachedPair(t, "tilted", p0, 5)
	l1, r1 := cachedPair(t, "tilted+stretch", p1, 7)
	ctx := context.Background()
	ref, err := Match(ctx, rig, l0, r0, figOptions())
	if err != nil {
		t.Fatal(err)
	}
	st, err := ref.Track(ctx, l0, r0, l1, r1)
	if err != nil {
		t.Fatal(err)
	}
	sf, err := Strain(ref, st, StrainOptions{})
	if err != nil {
		t.Fatal(err)
	}
	want := (1.005*1.005 - 1) / 2
	var d1, d2 []float64
	for _, s := range sf {
		if s.OK {
			d1 = append(d1, s.M.EMax-want)
			d2 = append(d2, s.M.EMin)
		}
	}
	m1, r1e := stats(d1)
	m2, r2e := stats(d2)
	t.Logf("tilted 20°, 0.5 %% stretch: %d points; E1 − %.5f: mean %.2e, RMS %.2e; E2: mean %.2e, RMS %.2e", len(d1), want, m1, r1e, m2, r2e)
	if len(d1) < len(sf)*7/10 {
		t.Errorf("only %d of %d points with strain", len(d1), len(sf))
	}
	if math.Abs(m1) > 1e-4 || r1e > 1e-4 || math.Abs(m2) > 1e-4 || r2e > 1e-4 {
		t.Errorf("surface strain off the truth: E1 mean %.2e RMS %.2e, E2 mean %.2e RMS %.2e: want within 1e-4", m1, r1e, m2, r2e)
	}
}

// TestBulgeFigure bulges the flat plate into the clamped-plate shape
// w = W0 (1 − r²/A²)² (A = 40 mm, W0 = 2 mm; synth.Bulge), every material
// point rising by w at its place. The closed-form surface strain is then
// E = ½ ∇w ∇wᵀ in the plate's coordinates: principal E1 = ½|∇w|² (up to
// 3.0e-3) and E2 = 0; the measured principal strains must follow it within
// 2e-4 RMS, and the out-of-plane displacement w within 0.01 mm RMS.
func TestBulgeFigure(t *testing.T) {
	lc, _, rig := bench(figW, figH)
	flat := synth.Placement{Shape: synth.Plane{}}
	b := synth.Bulge{A: 40, W0: 2}
	l0, r0 := cachedPair(t, "plane", flat, 1)
	l1, r1 := cachedPair(t, "bulge", synth.Placement{Shape: b}, 9)
	ctx := context.Background()
	ref, err := Match(ctx, rig, l0, r0, figOptions())
	if err != nil {
		t.Fatal(err)
	}
	st, err := ref.Track(ctx, l0, r0, l1, r1)
	if err != nil {
		t.Fatal(err)
	}
	sf, err := Strain(ref, st, StrainOptions{})
	if err != nil {
		t.Fatal(err)
	}
	var d1, d2, dw []float64
	var peak float64
	for k, s := range sf {
		if !s.OK {
			continue
		}
		p := ref.Points[k]
		X, Y, err := synth.SeenAt(flat, lc, p.X, p.Y)
		if err != nil {
			t.Fatal(err)
		}
		w, wx, wy := b.W(X, Y)
		want := (wx*wx + wy*wy) / 2
		peak = math.Max(peak, want)
		d1 = append(d1, s.M.EMax-want)
		d2 = append(d2, s.M.EMin)
		dw = append(dw, s.W-w)
	}
	m1, r1e := stats(d1)
	m2, r2e := stats(d2)
	mw, rw := stats(dw)
	t.Logf("bulge (peak E1 %.2e): %d points; E1 error mean %.2e RMS %.2e; E2 mean %.2e RMS %.2e; w error mean %.4f RMS %.4f mm",
		peak, len(d1), m1, r1e, m2, r2e, mw, rw)
	if len(d1) < len(sf)*7/10 {
		t.Errorf("only %d of %d points with strain", len(d1), len(sf))
	}
	if r1e > 2e-4 || r2e > 2e-4 || rw > 0.01 {
		t.Errorf("bulge: E1 RMS error %.2e, E2 RMS %.2e, w RMS error %.4f mm: want at most 2e-4, 2e-4, 0.01 mm", r1e, r2e, rw)
	}
}

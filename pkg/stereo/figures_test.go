package stereo

import (
	"context"
	"math"
	"strconv"
	"testing"

	"gonum.org/v1/gonum/mat"

	"github.com/mottledic/mottle/internal/figures"
	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/imageio"
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

// meanWorst returns the mean and the largest of v.
func meanWorst(v []float64) (mean, worst float64) {
	for _, x := range v {
		mean += x
		worst = math.Max(worst, x)
	}
	return mean / float64(max(len(v), 1)), worst
}

// seedFigures is what one pattern seed measures.
type seedFigures struct {
	plane, cylinder  float64 // shape RMS error, mm
	disp             float64 // RMS error of the 1 mm out-of-plane translation, mm
	oopStrain        float64 // largest |mean| or RMS of the false surface strain
	falseStrain2D    float64 // mean of the 2D left camera's exx and eyy
	tilted           float64 // largest |mean| or RMS of the principal strain errors
	bulgeE, bulgeW   float64 // RMS errors of E1 and of w, mm
	points, measured int     // points in the ROI and measured in every case (least)
}

// TestFigures measures the stereo figures on eight pattern seeds (each
// seed a new speckle pattern and new noise) and checks them against their
// bounds in internal/figures: the shape of a plane facing the bench and of
// a cylinder, a 1 mm out-of-plane translation with its false surface
// strain (beside the false strain of 2D correlation of the left camera),
// a 0.5 % stretch of a plane tilted by 20° and a bulged plate. The bounds
// of the first three are the limits of the stereo issue (0.005 mm, 1e-4).
func TestFigures(t *testing.T) {
	res := make([]seedFigures, seeds)
	t.Run("seeds", func(t *testing.T) {
		for s := range seeds {
			t.Run(strconv.Itoa(s+1), func(t *testing.T) {
				t.Parallel()
				res[s] = measureSeed(t, int64(s+1))
			})
		}
	})
	if t.Failed() {
		return
	}
	col := func(f func(seedFigures) float64) []float64 {
		v := make([]float64, len(res))
		for i, r := range res {
			v[i] = f(r)
		}
		return v
	}
	for _, c := range []struct {
		name string
		f    func(seedFigures) float64
	}{
		{"stereo/shape/plane", func(r seedFigures) float64 { return r.plane }},
		{"stereo/shape/cylinder", func(r seedFigures) float64 { return r.cylinder }},
		{"stereo/out-of-plane/displacement", func(r seedFigures) float64 { return r.disp }},
		{"stereo/out-of-plane/strain", func(r seedFigures) float64 { return r.oopStrain }},
		{"stereo/tilted/strain", func(r seedFigures) float64 { return r.tilted }},
		{"stereo/bulge/strain", func(r seedFigures) float64 { return r.bulgeE }},
		{"stereo/bulge/w", func(r seedFigures) float64 { return r.bulgeW }},
	} {
		m, w := meanWorst(col(c.f))
		figures.Check(t, c.name+"/mean", m)
		figures.Check(t, c.name+"/worst", w)
	}
	m, _ := meanWorst(col(func(r seedFigures) float64 { return r.falseStrain2D }))
	figures.Check(t, "stereo/out-of-plane/2d-strain", m)
	for i, r := range res {
		// Strain windows near the ROI's border lack neighbours.
		if r.measured < r.points*7/10 {
			t.Errorf("seed %d: only %d of %d points measured in some case: want 70 %%", i+1, r.measured, r.points)
		}
	}
}

// measureSeed measures every figure of one pattern seed.
func measureSeed(t *testing.T, seed int64) (f seedFigures) {
	lc, _, rig := bench(figW, figH)
	sc := newScene(t, seed)
	ctx := context.Background()
	o := figOptions(t)
	flat := synth.Placement{Shape: synth.Plane{}}
	f.measured = math.MaxInt
	count := func(n int) { f.measured = min(f.measured, n) }

	// Shape: the plane and the cylinder (R = 60 mm, axis vertical).
	l0, r0 := sc.pair(flat, flat, 0)
	ref, err := Match(ctx, rig, l0, r0, o)
	if err != nil {
		t.Error(err)
		return
	}
	f.points = inROI(ref)
	var n int
	f.plane, _, n = shapeError(t, ref, flat)
	count(n)
	cyl := synth.Placement{Shape: synth.Cylinder{R: 60}}
	lc0, rc0 := sc.pair(cyl, cyl, 1)
	cref, err := Match(ctx, rig, lc0, rc0, o)
	if err != nil {
		t.Error(err)
		return
	}
	f.cylinder, _, n = shapeError(t, cref, cyl)
	count(n)

	// 1 mm toward the bench, along the plane's normal.
	moved := synth.Placement{Shape: synth.Plane{}, Pose: synth.Pose{T: [3]float64{0, 0, 1}}}
	l1, r1 := sc.pair(flat, moved, 2)
	f.disp, f.oopStrain, n = outOfPlane(t, ref, l0, r0, l1, r1, mulv(lc.Pose.R, [3]float64{0, 0, 1}))
	count(n)
	f.falseStrain2D = falseStrain2D(t, l0, l1)

	// 0.5 % stretch of a plane tilted 20° about the vertical.
	tilt := synth.PoseFromAngles(0, 20*math.Pi/180, 0, [3]float64{})
	p0 := synth.Placement{Shape: synth.Plane{}, Pose: tilt}
	p1 := synth.Placement{Shape: synth.Plane{}, Pose: tilt, Motion: synth.Affine{F: [2][2]float64{{1.005, 0}, {0, 1}}}}
	lt0, rt0 := sc.pair(p0, p0, 3)
	lt1, rt1 := sc.pair(p0, p1, 4)
	f.tilted, n = tiltedStretch(t, rig, o, lt0, rt0, lt1, rt1)
	count(n)

	// The bulged plate.
	b := synth.Bulge{A: 40, W0: 2}
	lb, rb := sc.pair(flat, synth.Placement{Shape: b}, 5)
	f.bulgeE, f.bulgeW, n = bulge(t, ref, lc, flat, b, l0, r0, lb, rb)
	count(n)
	t.Logf("seed %d: %d points; shape RMS plane %.5f, cylinder %.5f mm; 1 mm: error RMS %.5f mm, false strain %.2e (2D: %.2e); tilted stretch %.2e; bulge E1 %.2e, w %.4f mm",
		seed, f.points, f.plane, f.cylinder, f.disp, f.oopStrain, f.falseStrain2D, f.tilted, f.bulgeE, f.bulgeW)
	return f
}

// worstComponent returns the largest |mean| or RMS over the strain
// components given.
func worstComponent(cs ...[]float64) float64 {
	var w float64
	for _, c := range cs {
		m, r := stats(c)
		w = math.Max(w, math.Max(math.Abs(m), r))
	}
	return w
}

// outOfPlane tracks the translation truth (mm, left frame) from the
// plane's reference: the RMS length of the displacement error, and the
// false surface strain (largest |mean| or RMS of E11, E22, E12).
func outOfPlane(t *testing.T, ref *Reference, l0, r0, l1, r1 *imageio.Gray, truth [3]float64) (disp, strain float64, n int) {
	st, err := ref.Track(context.Background(), l0, r0, l1, r1)
	if err != nil {
		t.Error(err)
		return math.Inf(1), math.Inf(1), 0
	}
	var errLen, e11, e22, e12 []float64
	for _, p := range st.Points {
		if p.Status == OK {
			errLen = append(errLen, math.Sqrt(sq(p.Disp[0]-truth[0])+sq(p.Disp[1]-truth[1])+sq(p.Disp[2]-truth[2])))
		}
	}
	sf, err := Strain(ref, st, StrainOptions{})
	if err != nil {
		t.Error(err)
		return math.Inf(1), math.Inf(1), 0
	}
	for _, s := range sf {
		if s.OK {
			e11 = append(e11, s.M.E[0][0])
			e22 = append(e22, s.M.E[1][1])
			e12 = append(e12, s.M.E[0][1])
		}
	}
	_, disp = stats(errLen)
	return disp, worstComponent(e11, e22, e12), min(len(errLen), len(e11))
}

// falseStrain2D returns the mean of ∂u/∂x and ∂v/∂y that 2D correlation
// of the left camera alone reports for the same translation: about
// w/Z = 1/500 = 2e-3, the pinhole magnification change (common practice;
// Sutton, Yan, Tiwari, Schreier & Orteu 2008, "The effect of out-of-plane
// motion on 2D and 3D digital image correlation measurements", Opt. Lasers
// Eng. 46:746).
func falseStrain2D(t *testing.T, l0, l1 *imageio.Gray) float64 {
	o := figOptions(t).Correlate
	o.Interp, o.Prefilter = 0, 0
	res, err := correlate.Run(context.Background(), l0, l1, o)
	if err != nil {
		t.Error(err)
		return 0
	}
	ux, vy := planeFit(res)
	return (ux + vy) / 2
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
	if len(rows) < 3 {
		return 0, 0
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

// tiltedStretch measures the 0.5 % stretch along the tilted direction s
// of a plane tilted 20°: the surface Green–Lagrange strain is then
// E_ss = (1.005² − 1)/2 = 5.0125e-3 and zero otherwise (closed form). It
// returns the largest |mean| or RMS of the errors of E1 and E2.
func tiltedStretch(t *testing.T, rig *calib.Rig, o Options, l0, r0, l1, r1 *imageio.Gray) (float64, int) {
	ctx := context.Background()
	ref, err := Match(ctx, rig, l0, r0, o)
	if err != nil {
		t.Error(err)
		return math.Inf(1), 0
	}
	st, err := ref.Track(ctx, l0, r0, l1, r1)
	if err != nil {
		t.Error(err)
		return math.Inf(1), 0
	}
	sf, err := Strain(ref, st, StrainOptions{})
	if err != nil {
		t.Error(err)
		return math.Inf(1), 0
	}
	want := (1.005*1.005 - 1) / 2
	var d1, d2 []float64
	for _, s := range sf {
		if s.OK {
			d1 = append(d1, s.M.EMax-want)
			d2 = append(d2, s.M.EMin)
		}
	}
	return worstComponent(d1, d2), len(d1)
}

// bulge bulges the flat plate into the clamped-plate shape
// w = W0 (1 − r²/A²)² (A = 40 mm, W0 = 2 mm; synth.Bulge), every material
// point rising by w at its place. The closed-form surface strain is then
// E = ½ ∇w ∇wᵀ in the plate's coordinates: principal E1 = ½|∇w|² and
// E2 = 0. It returns the larger RMS error of E1 and E2, and the RMS
// error of w, mm.
func bulge(t *testing.T, ref *Reference, lc synth.Cam, flat synth.Placement, b synth.Bulge, l0, r0, l1, r1 *imageio.Gray) (e, w float64, n int) {
	st, err := ref.Track(context.Background(), l0, r0, l1, r1)
	if err != nil {
		t.Error(err)
		return math.Inf(1), math.Inf(1), 0
	}
	sf, err := Strain(ref, st, StrainOptions{})
	if err != nil {
		t.Error(err)
		return math.Inf(1), math.Inf(1), 0
	}
	var d1, d2, dw []float64
	for k, s := range sf {
		if !s.OK {
			continue
		}
		p := ref.Points[k]
		X, Y, err := synth.SeenAt(flat, lc, p.X, p.Y)
		if err != nil {
			t.Error(err)
			return math.Inf(1), math.Inf(1), 0
		}
		wt, wx, wy := b.W(X, Y)
		d1 = append(d1, s.M.EMax-(wx*wx+wy*wy)/2)
		d2 = append(d2, s.M.EMin)
		dw = append(dw, s.W-wt)
	}
	_, e1 := stats(d1)
	_, e2 := stats(d2)
	_, w = stats(dw)
	e = math.Max(e1, e2)
	return e, w, len(d1)
}

package series

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
)

// motion is an exactly known, smooth, non-affine mapping
// x = X + b + s·q(X − c) with q(d) = (a1·dx², a2·dx·dy) plus a uniform
// stretch: x = c + diag(l1, l2)(X − c) + b + s·q(X − c).
type motion struct {
	l1, l2, s float64
	b         [2]float64
	directZ   float64 // ZNCC the fake reports for direct correlation
}

const mc = 40.0 // centre of the test motions

func (m motion) fwd(X, Y float64) (x, y float64) {
	dx, dy := X-mc, Y-mc
	return mc + m.l1*dx + m.b[0] + m.s*1e-3*dx*dx, mc + m.l2*dy + m.b[1] + m.s*5e-4*dx*dy
}

func (m motion) grad(X, Y float64) (a, b, c, d float64) {
	dx, dy := X-mc, Y-mc
	return m.l1 + m.s*2e-3*dx, 0, m.s * 5e-4 * dy, m.l2 + m.s*5e-4*dx
}

// inv solves fwd(X) = x by Newton's method.
func (m motion) inv(x, y float64) (X, Y float64) {
	X, Y = x, y
	for range 50 {
		fx, fy := m.fwd(X, Y)
		a, b, c, d := m.grad(X, Y)
		det := a*d - b*c
		rx, ry := fx-x, fy-y
		X -= (d*rx - b*ry) / det
		Y -= (-c*rx + a*ry) / det
	}
	return X, Y
}

// fake is an exact correlator: it knows the motion of every image.
type fake struct {
	ref  *imageio.Gray
	g    lattice
	mot  map[*imageio.Gray]motion
	nDir int
	nInc int
}

func (f *fake) grid() lattice { return f.g }

func (f *fake) direct(ctx context.Context, def *imageio.Gray, start []guess, progress func(done, total int)) ([]match, error) {
	f.nDir++
	if progress != nil {
		progress(len(start), len(start))
	}
	m := f.mot[def]
	out := make([]match, f.g.Nx*f.g.Ny)
	for k := range out {
		X, Y := f.g.pos(k)
		x, y := m.fwd(X, Y)
		a, b, c, d := m.grad(X, Y)
		out[k] = match{U: x - X, V: y - Y, Ux: a - 1, Uy: b, Vx: c, Vy: d - 1, ZNCC: m.directZ, StdU: 0.01, StdV: 0.01, OK: true}
	}
	return out, nil
}

func (f *fake) at(ctx context.Context, src, dst *imageio.Gray, pts [][2]float64, start []guess, progress func(done, total int)) ([]match, error) {
	f.nInc++
	if progress != nil {
		progress(len(pts), len(pts))
	}
	ms, md := f.mot[src], f.mot[dst]
	out := make([]match, len(pts))
	for k, p := range pts {
		X, Y := ms.inv(p[0], p[1])
		x, y := md.fwd(X, Y)
		// ∇φ_inc = ∇φ_dst(X)·∇φ_src(X)⁻¹
		a, b, c, d := md.grad(X, Y)
		e, g, h, i := ms.grad(X, Y)
		det := e*i - g*h
		ie, ig, ih, ii := i/det, -g/det, -h/det, e/det
		out[k] = match{U: x - p[0], V: y - p[1],
			Ux: a*ie + b*ih - 1, Uy: a*ig + b*ii, Vx: c*ie + d*ih, Vy: c*ig + d*ii - 1,
			ZNCC: 0.99, StdU: 0.01, StdV: 0.01, OK: true}
	}
	return out, nil
}

func newFake(motions []motion) (*fake, []*imageio.Gray) {
	f := &fake{ref: imageio.NewGray(80, 80), g: lattice{X0: 20, Y0: 20, Step: 4, Nx: 11, Ny: 11}, mot: map[*imageio.Gray]motion{}}
	f.mot[f.ref] = motion{l1: 1, l2: 1, directZ: 1}
	var imgs []*imageio.Gray
	for _, m := range motions {
		im := imageio.NewGray(80, 80)
		f.mot[im] = m
		imgs = append(imgs, im)
	}
	return f, imgs
}

func testParams() Params {
	p := Defaults()
	p.Analysis.Subset, p.Analysis.Step = 11, 4
	p.Extensometers = []Extensometer{{Name: "axial", A: [2]float64{24, 40}, B: [2]float64{56, 40}}}
	p.Gauges = []Gauge{{Name: "centre", Rect: &[4]float64{28, 28, 52, 52}}}
	return p
}

// TestIncrementalComposition: with an exact correlator and a non-affine
// motion, composing the increments at each material point must reproduce
// the direct (true) displacement at every point, even though the grid of
// current positions is no longer regular. Adding increments that belong to
// different points would miss it by the motion's curvature.
func TestIncrementalComposition(t *testing.T) {
	var ms []motion
	for n := 1; n <= 6; n++ {
		s := float64(n)
		z := 0.99
		if n >= 3 {
			z = 0.5 // direct correlation "fails" from frame 3 on
		}
		// The curvature grows as s² while the stretch grows as s, so the
		// increments do not commute and the order of composition matters.
		ms = append(ms, motion{l1: 1 + 0.05*s, l2: 1 - 0.015*s, s: s * s / 2, b: [2]float64{0.7 * s, -0.3 * s}, directZ: z})
	}
	f, imgs := newFake(ms)
	tr, err := newTracker(f.ref, FrameMeta{}, testParams(), f)
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	var last *Frame
	for n, im := range imgs {
		fr, err := tr.Add(ctx, im, FrameMeta{})
		if err != nil {
			t.Fatal(err)
		}
		want := ModeDirect
		if n+1 >= 3 {
			want = ModeIncremental
		}
		if fr.Summary.Mode != want {
			t.Errorf("frame %d mode %s, want %s", n+1, fr.Summary.Mode, want)
		}
		last = fr
	}
	m := ms[len(ms)-1]
	worst := 0.0
	for k := range tr.st.Points {
		X, Y := f.g.pos(k)
		x, y := m.fwd(X, Y)
		worst = math.Max(worst, math.Max(math.Abs(last.Quantities["u"][k]-(x-X)), math.Abs(last.Quantities["v"][k]-(y-Y))))
		a, b, c, d := m.grad(X, Y)
		F := tr.st.Points[k].F
		for i, w := range [4]float64{a, b, c, d} {
			if math.Abs(F[i]-w) > 1e-9 {
				t.Fatalf("point %d: composed F%d = %g, want %g", k, i, F[i], w)
			}
		}
	}
	if !(worst <= 1e-9) {
		t.Errorf("composed displacement off the truth by %g px", worst)
	}
	// Extensometer: the segment at y = 40 maps through the motion exactly.
	xa, ya := m.fwd(24, 40)
	xb, yb := m.fwd(56, 40)
	wantL := math.Hypot(xb-xa, yb-ya)
	if got := last.Summary.Extensometers[0].L; math.Abs(got-wantL) > 1e-3*wantL {
		t.Errorf("extensometer L = %g, want %g", got, wantL)
	}
	if f.nDir != 3 {
		t.Errorf("direct correlations run: %d, want 3 (frames 1–3; none after the switch)", f.nDir)
	}
}

// TestVelocityConstant: a constant-velocity translation u = (vx·t, vy·t)
// gives vel_u = vx and vel_v = vy at every point and zero acceleration.
func TestVelocityConstant(t *testing.T) {
	const vx, vy = 2.5, -1.25                 // px/s
	times := []float64{0, 0.4, 1.0, 1.3, 2.1} // uneven steps
	var ms []motion
	for _, tt := range times[1:] {
		ms = append(ms, motion{l1: 1, l2: 1, b: [2]float64{vx * tt, vy * tt}, directZ: 0.99})
	}
	f, imgs := newFake(ms)
	tr, err := newTracker(f.ref, FrameMeta{Time: &times[0]}, testParams(), f)
	if err != nil {
		t.Fatal(err)
	}
	for n, im := range imgs {
		fr, err := tr.Add(context.Background(), im, FrameMeta{Time: &times[n+1]})
		if err != nil {
			t.Fatal(err)
		}
		for k := range fr.Quantities["vel_u"] {
			if math.Abs(fr.Quantities["vel_u"][k]-vx) > 1e-9 || math.Abs(fr.Quantities["vel_v"][k]-vy) > 1e-9 {
				t.Fatalf("frame %d point %d: velocity (%g, %g), want (%g, %g)", n+1, k, fr.Quantities["vel_u"][k], fr.Quantities["vel_v"][k], vx, vy)
			}
			if a := fr.Quantities["acc_u"]; n > 0 && math.Abs(a[k]) > 1e-9 {
				t.Fatalf("frame %d: acceleration %g, want 0", n+1, a[k])
			}
		}
	}
}

func TestDeriv(t *testing.T) {
	// f = 3t² − 2t + 1: f' = 6t − 2, f'' = 6 at t = 2.5.
	f := func(t float64) float64 { return 3*t*t - 2*t + 1 }
	d1, d2 := deriv(0.5, 1.7, 2.5, f(0.5), f(1.7), f(2.5))
	if math.Abs(d1-13) > 1e-12 || math.Abs(d2-6) > 1e-12 {
		t.Errorf("deriv = %g, %g; want 13, 6", d1, d2)
	}
}

// TestStateRoundTrip: a series stopped after two frames, encoded to JSON,
// restored and continued gives the same results as one run straight
// through.
func TestStateRoundTrip(t *testing.T) {
	var ms []motion
	for n := 1; n <= 4; n++ {
		s := float64(n)
		z := 0.99
		if n >= 2 {
			z = 0.1
		}
		ms = append(ms, motion{l1: 1 + 0.03*s, l2: 1, s: s, directZ: z})
	}
	times := []float64{0, 1, 2, 3, 4}
	run := func(stopAt int) Curve {
		f, imgs := newFake(ms)
		tr, err := newTracker(f.ref, FrameMeta{Time: &times[0]}, testParams(), f)
		if err != nil {
			t.Fatal(err)
		}
		for n, im := range imgs {
			if n == stopAt {
				b, err := json.Marshal(tr.State())
				if err != nil {
					t.Fatal(err)
				}
				var st State
				if err := json.Unmarshal(b, &st); err != nil {
					t.Fatal(err)
				}
				tr, err = restore(f.ref, imgs[n-1], st, f)
				if err != nil {
					t.Fatal(err)
				}
			}
			if _, err := tr.Add(context.Background(), im, FrameMeta{Time: &times[n+1]}); err != nil {
				t.Fatal(err)
			}
		}
		return tr.Curve()
	}
	a, b := run(-1), run(2)
	ja, _ := json.Marshal(a)
	jb, _ := json.Marshal(b)
	if string(ja) != string(jb) {
		t.Errorf("restored series differs:\n%s\n%s", ja, jb)
	}
	if a.Rows[4].Mode != ModeIncremental || a.Rows[1].Mode != ModeDirect {
		t.Errorf("modes %v", a.Modes())
	}
}

// TestHistoryKept: a state keeps the snapshots of the last two frames
// (keptHistory), and a series continued from a state with three, as
// earlier versions wrote it, gives the same frames as one continued from
// the same state with two and as one run straight through: the velocity
// and acceleration (the quadratic through the last three frames' times)
// and the incremental steps' guesses read only the last two.
func TestHistoryKept(t *testing.T) {
	var ms []motion
	for n := 1; n <= 6; n++ {
		s := float64(n)
		z := 0.99
		if n >= 3 {
			z = 0.1 // incremental from frame 3 on
		}
		ms = append(ms, motion{l1: 1 + 0.02*s*s, l2: 1 - 0.004*s, s: 0.3 * s * s, directZ: z})
	}
	times := []float64{0, 0.5, 1.2, 1.5, 2.4, 2.6, 3.5}
	run := func(stopAt, history int) []string {
		f, imgs := newFake(ms)
		tr, err := newTracker(f.ref, FrameMeta{Time: &times[0]}, testParams(), f)
		if err != nil {
			t.Fatal(err)
		}
		var snaps []Snapshot // every frame's snapshot, the reference's first
		snaps = append(snaps, tr.State().History...)
		var out []string
		for n, im := range imgs {
			if n == stopAt {
				st := tr.State()
				if len(st.History) != keptHistory {
					t.Fatalf("after frame %d the state holds %d snapshots, want %d", n, len(st.History), keptHistory)
				}
				if history == 3 {
					st.History = append([]Snapshot{snaps[len(snaps)-3]}, st.History...)
				}
				if tr, err = restore(f.ref, imgs[n-1], st, f); err != nil {
					t.Fatal(err)
				}
			}
			fr, err := tr.Add(context.Background(), im, FrameMeta{Time: &times[n+1]})
			if err != nil {
				t.Fatal(err)
			}
			h := tr.State().History
			snaps = append(snaps, h[len(h)-1])
			out = append(out, fmt.Sprint(fr.Quantities)) // shortest exact form, keys sorted

		}
		c, _ := json.Marshal(tr.Curve())
		return append(out, string(c))
	}
	straight := run(-1, 0)
	for _, stop := range []int{3, 4} {
		two, three := run(stop, 2), run(stop, 3)
		for k := range straight {
			if two[k] != straight[k] || three[k] != straight[k] {
				t.Errorf("stopped at %d, item %d (the last is the curve) differs: straight, from 2 snapshots, from 3:\n%s\n%s\n%s", stop, k, straight[k], two[k], three[k])
			}
		}
	}
	if !strings.Contains(straight[4], "acc_u") {
		t.Error("frame 5 has no acceleration: the test does not reach the three-sample derivative")
	}
}

func TestAddErrors(t *testing.T) {
	f, imgs := newFake([]motion{{l1: 1, l2: 1, directZ: 1}})
	t0, t1 := 1.0, 0.5
	tr, err := newTracker(f.ref, FrameMeta{Time: &t0}, testParams(), f)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := tr.Add(context.Background(), imageio.NewGray(10, 10), FrameMeta{}); err == nil {
		t.Error("wrong size accepted")
	}
	if _, err := tr.Add(context.Background(), imgs[0], FrameMeta{Time: &t1}); err == nil {
		t.Error("decreasing time accepted")
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := tr.Add(ctx, imgs[0], FrameMeta{}); err == nil {
		t.Error("cancelled context accepted")
	}
	if tr.Len() != 0 {
		t.Errorf("failed adds left %d frames", tr.Len())
	}
	bad := testParams()
	bad.Incremental = "sometimes"
	bad.Gauges = []Gauge{{Name: "g"}}
	if _, err := newTracker(f.ref, FrameMeta{}, bad, f); err == nil {
		t.Error("bad params accepted")
	}
}

package series3d

import (
	"bytes"
	"context"
	"encoding/json"
	"image"
	"math"
	"strings"
	"testing"

	"github.com/mottledic/mottle/internal/stereobench"
	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/synth"
)

// The scene (invented): the bench of synth.BenchRig at 640×480 px (about
// 100 mm across), a flat specimen tilted 20° about the vertical, pulled
// along its tilted direction s with an invented elastic law (E = 70 GPa,
// ν = 0.33, cross-section 20 mm²) while it creeps 0.25 mm per frame
// toward the cameras, which 2D correlation would read as a false strain of
// about 0.25/500 = 5e-4 per frame (common practice).
const (
	imW, imH = 640, 480
	modulus  = 70000.0 // MPa
	poisson  = 0.33
	area     = 20.0 // mm²
)

// roiRect is the left region the test measures; only what it reaches is rendered.
var roiRect = image.Rect(160, 140, 480, 340)

// scaled is a speckle pattern in mm (stereobench.Scaled).
type scaled = stereobench.Scaled

// rig returns the bench cameras and their exact rig.
func rig() (l, r synth.Cam, rg *calib.Rig) {
	return stereobench.Rig(imW, imH)
}

// placement is frame i's specimen: axial engineering strain ea.
func placement(ea float64, i int) synth.Placement {
	tilt := synth.PoseFromAngles(0, 20*math.Pi/180, 0, [3]float64{})
	n := [3]float64{tilt.R[0][2], tilt.R[1][2], tilt.R[2][2]} // the plane's normal in the world
	for k := range n {
		tilt.T[k] = 0.25 * float64(i) * n[k]
	}
	return synth.Placement{Shape: synth.Plane{}, Pose: tilt, Motion: synth.Affine{F: [2][2]float64{{1 + ea, 0}, {0, 1 - poisson*ea}}}}
}

// render renders frame i in both cameras.
func render(t *testing.T, pat synth.Surface, ea float64, i int) (l, r *imageio.Gray) {
	t.Helper()
	return renderAt(t, pat, placement(ea, i), int64(10*i))
}

// renderAt renders the specimen at placement p in both cameras, with the
// noise of seed.
func renderAt(t *testing.T, pat synth.Surface, p synth.Placement, seed int64) (l, r *imageio.Gray) {
	t.Helper()
	lc, rc, _ := rig()
	ref := placement(0, 0)
	var out [2]*imageio.Gray
	for k, c := range []synth.Cam{lc, rc} {
		// The pixels that can see the material of the left ROI.
		x0, y0, x1, y1 := math.Inf(1), math.Inf(1), math.Inf(-1), math.Inf(-1)
		for y := roiRect.Min.Y; y <= roiRect.Max.Y; y += 20 {
			for x := roiRect.Min.X; x <= roiRect.Max.X; x += 20 {
				s, u, err := synth.SeenAt(ref, lc, float64(x), float64(y))
				if err != nil {
					t.Fatal(err)
				}
				px, py, _ := c.Project(p.Position(s, u))
				x0, y0, x1, y1 = math.Min(x0, px), math.Min(y0, py), math.Max(x1, px), math.Max(y1, py)
			}
		}
		win := image.Rect(int(x0)-48, int(y0)-48, int(x1)+48, int(y1)+48)
		g, _, err := synth.RenderSurfaceWindow(pat, p, c, synth.RenderOptions{W: imW, H: imH, Supersample: 2, Noise: 0.5, Seed: seed + int64(k)}, win)
		if err != nil {
			t.Fatal(err)
		}
		out[k] = g
	}
	return out[0], out[1]
}

// TestTensileSeries pulls the tilted specimen through six frames and
// recovers the invented law from extensometers measured in space and from
// a gauge: Young's modulus (ASTM E111 chord fit of pkg/series/props) and
// Poisson's ratio within 1 % and 0.01 of the law, although the specimen
// moves 1.25 mm toward the cameras; the extensometer's reference length
// is the true distance between its end points on the specimen.
func TestTensileSeries(t *testing.T) {
	p0, err := synth.NewPattern(synth.PatternOptions{Diameter: 7, Seed: 5, Bounds: synth.Rect{X0: -600, Y0: -450, X1: 600, Y1: 450}})
	if err != nil {
		t.Fatal(err)
	}
	pat := scaled{P: p0}
	lc, _, rg := rig()
	cx, cy := float64(roiRect.Min.X+roiRect.Max.X)/2, float64(roiRect.Min.Y+roiRect.Max.Y)/2
	pf := 0.7
	p := Params{Subset: 31, Step: 16, Prefilter: &pf,
		Extensometers: []series.Extensometer{
			{Name: "axial", A: [2]float64{float64(roiRect.Min.X) + 40, cy}, B: [2]float64{float64(roiRect.Max.X) - 40, cy}},
			{Name: "width", A: [2]float64{cx, float64(roiRect.Min.Y) + 40}, B: [2]float64{cx, float64(roiRect.Max.Y) - 40}},
		},
		Gauges:     []series.Gauge{{Name: "mid", Rect: &[4]float64{cx - 100, cy - 60, cx + 100, cy + 60}}},
		Area:       area,
		Properties: series.PropsParams{Axial: "axial", Transverse: "width", ModulusRange: [2]float64{0.0005, 0.0045}},
	}
	ctx := context.Background()
	l0, r0 := render(t, pat, 0, 0)
	// The mask of the ROI.
	s, err := New(ctx, rg, l0, r0, series.FrameMeta{Name: "f0", Load: new(float64)}, withROI(t, p))
	if err != nil {
		t.Fatal(err)
	}
	var saved []byte
	for i := 1; i <= 5; i++ {
		ea := 0.001 * float64(i)
		load := modulus * ea * area
		l, r := render(t, pat, ea, i)
		meta := series.FrameMeta{Name: "f" + string(rune('0'+i)), Load: &load}
		if i == 5 {
			// A series restored from its saved state in another process
			// (series3d.Restore: nothing matched again) goes on exactly
			// as the one it was saved from.
			st, err := UnmarshalState(saved)
			if err != nil {
				t.Fatal(err)
			}
			again, err := Restore(rg, l0, r0, withROI(t, p), st)
			if err != nil {
				t.Fatal(err)
			}
			if _, _, err := again.Add(ctx, l, r, meta); err != nil {
				t.Fatal(err)
			}
			defer func() {
				a, _ := json.Marshal(again.Curve().Rows)
				b, _ := json.Marshal(s.Curve().Rows)
				if !bytes.Equal(a, b) || len(a) < 1000 {
					t.Errorf("restored series' curve differs from the original's:\n%s\n%s", a, b)
				}
			}()
		}
		if _, _, err := s.Add(ctx, l, r, meta); err != nil {
			t.Fatal(err)
		}
		if saved, err = s.MarshalState(); err != nil {
			t.Fatal(err)
		}
	}
	c := s.Curve()
	var b strings.Builder
	if err := c.WriteCSV(&b); err != nil {
		t.Fatal(err)
	}
	t.Log("\n" + b.String())
	// The reference length against the specimen's own.
	ref := placement(0, 0)
	seen := func(q [2]float64) [3]float64 {
		a, b, err := synth.SeenAt(ref, lc, q[0], q[1])
		if err != nil {
			t.Fatal(err)
		}
		return ref.Position(a, b)
	}
	e := p.Extensometers[0]
	L0 := dist(seen(e.A), seen(e.B))
	got := c.Rows[0].Extensometers[0].L0
	t.Logf("axial extensometer: reference length %.4f mm, true %.4f mm", got, L0)
	if math.Abs(got-L0) > 0.01 {
		t.Errorf("axial extensometer reference length %.4f mm, true %.4f mm: want within 0.01 mm", got, L0)
	}
	for i, row := range c.Rows[1:] {
		ea := 0.001 * float64(i+1)
		x := row.Extensometers[0]
		if !x.Valid || math.Abs(x.Eng-ea) > 1e-4 {
			t.Errorf("frame %d: axial engineering strain %.6f (valid %v), truth %.6f: want within 1e-4", i+1, x.Eng, x.Valid, ea)
		}
	}
	pr := s.Properties()
	if pr.Modulus == nil || pr.Poisson == nil {
		t.Fatalf("properties not computed: %v", pr.Skipped)
	}
	t.Logf("from extensometers: E %.0f MPa (law %.0f), ν %.4f (law %.2f)", pr.Modulus.E, modulus, pr.Poisson.Nu, poisson)
	if d := math.Abs(pr.Modulus.E/modulus - 1); d > 0.01 {
		t.Errorf("Young's modulus %.0f MPa: want the law's %.0f within 1 %%", pr.Modulus.E, modulus)
	}
	if d := math.Abs(pr.Poisson.Nu - poisson); d > 0.01 {
		t.Errorf("Poisson's ratio %.4f: want the law's %.2f within 0.01", pr.Poisson.Nu, poisson)
	}
	// The same from the gauge's mean surface strains.
	s.p.Properties.Axial, s.p.Properties.Transverse = "gauge:mid:E11", "gauge:mid:E22"
	s.curve.Params.Properties = s.p.Properties
	pg := s.Properties()
	if pg.Modulus == nil || pg.Poisson == nil {
		t.Fatalf("gauge properties not computed: %v", pg.Skipped)
	}
	t.Logf("from the gauge: E %.0f MPa, ν %.4f", pg.Modulus.E, pg.Poisson.Nu)
	if d := math.Abs(pg.Modulus.E/modulus - 1); d > 0.01 {
		t.Errorf("gauge: Young's modulus %.0f MPa: want the law's %.0f within 1 %%", pg.Modulus.E, modulus)
	}
	if d := math.Abs(pg.Poisson.Nu - poisson); d > 0.01 {
		t.Errorf("gauge: Poisson's ratio %.4f: want the law's %.2f within 0.01", pg.Poisson.Nu, poisson)
	}
}

// TestNoiseFloor: two static pairs after the reference (the specimen
// unmoved, new camera noise) give the noise floor of the curve, and a
// series restored from its state keeps it. The truth of a static pair is
// no motion at all, so the mean of each quantity is its bias and the
// spread its noise: both within the bounds for a stereo
// measurement (0.005 mm of displacement, 1e-4 of false strain), and the
// moved frame after them is not counted.
func TestNoiseFloor(t *testing.T) {
	p0, err := synth.NewPattern(synth.PatternOptions{Diameter: 7, Seed: 5, Bounds: synth.Rect{X0: -600, Y0: -450, X1: 600, Y1: 450}})
	if err != nil {
		t.Fatal(err)
	}
	pat := scaled{P: p0}
	_, _, rg := rig()
	ctx := context.Background()
	p := withROI(t, Params{Subset: 31, Step: 16, StaticFrames: 2})
	l0, r0 := render(t, pat, 0, 0)
	s, err := New(ctx, rg, l0, r0, series.FrameMeta{Name: "ref"}, p)
	if err != nil {
		t.Fatal(err)
	}
	for k, seed := range []int64{101, 203} {
		l, r := renderAt(t, pat, placement(0, 0), seed)
		if _, row, err := s.Add(ctx, l, r, series.FrameMeta{Name: "static"}); err != nil || !row.Static {
			t.Fatalf("static frame %d: static %v, %v", k+1, row.Static, err)
		}
	}
	l, r := render(t, pat, 0.002, 1)
	if _, row, err := s.Add(ctx, l, r, series.FrameMeta{Name: "moved"}); err != nil || row.Static {
		t.Fatalf("moved frame: static %v, %v; want not static", row.Static, err)
	}
	nf := s.Curve().Noise
	if nf == nil || nf.Frames != 2 {
		t.Fatalf("noise floor %+v, want one of 2 frames", nf)
	}
	t.Logf("noise floor: std %v, mean %v", nf.Std, nf.Mean)
	for _, q := range []string{"u", "v", "w"} {
		if s, m := nf.Std[q], nf.Mean[q]; !(s > 0 && s < 0.005 && math.Abs(m) < 0.005) {
			t.Errorf("%s: noise %.6f mm, bias %.6f mm: want a positive noise and both below 0.005 mm", q, s, m)
		}
	}
	for _, q := range []string{"E11", "E22", "E12"} {
		if s, m := nf.Std[q], nf.Mean[q]; !(s > 0 && s < 1e-4 && math.Abs(m) < 1e-4) {
			t.Errorf("%s: noise %.3g, bias %.3g: want a positive noise and both below 1e-4", q, s, m)
		}
	}
	b, err := s.MarshalState()
	if err != nil {
		t.Fatal(err)
	}
	st, err := UnmarshalState(b)
	if err != nil {
		t.Fatal(err)
	}
	if c := CurveOf(p, st); c.Noise == nil || c.Noise.Std["w"] != nf.Std["w"] {
		t.Errorf("noise floor of the stored state %+v, want %+v", c.Noise, nf)
	}
}

// TestIncremental: the specimen slides 4 mm per frame across the field
// (about 26 px in the left image, within correlate's 40 px integer
// search), so the second frame, 8 mm from the reference, is beyond the
// search from the reference pair. Tracked only from the reference pair
// ("never") it keeps few points; "auto" tracks it from the first frame
// instead (stereo.TrackFrom) and measures the rigid slide: its in-plane
// and out-of-plane parts within 0.01 mm, with no false strain above 2e-4 (the truth of a rigid motion is
// zero strain). A series restored with the first frame's images goes on
// exactly as the original.
func TestIncremental(t *testing.T) {
	p0, err := synth.NewPattern(synth.PatternOptions{Diameter: 7, Seed: 5, Bounds: synth.Rect{X0: -600, Y0: -450, X1: 600, Y1: 450}})
	if err != nil {
		t.Fatal(err)
	}
	pat := scaled{P: p0}
	_, _, rg := rig()
	ctx := context.Background()
	at := func(x float64) synth.Placement {
		pl := placement(0, 0)
		pl.Pose.T[0] += x
		return pl
	}
	l0, r0 := render(t, pat, 0, 0)
	l1, r1 := renderAt(t, pat, at(4), 11)
	l2, r2 := renderAt(t, pat, at(8), 21)
	run := func(mode string) (*Series, []series.Summary) {
		s, err := New(ctx, rg, l0, r0, series.FrameMeta{Name: "ref"}, withROI(t, Params{Subset: 31, Step: 16, Incremental: mode}))
		if err != nil {
			t.Fatal(err)
		}
		var rows []series.Summary
		for _, f := range [][2]*imageio.Gray{{l1, r1}, {l2, r2}} {
			_, row, err := s.Add(ctx, f[0], f[1], series.FrameMeta{})
			if err != nil {
				t.Fatal(err)
			}
			rows = append(rows, row)
		}
		return s, rows
	}
	_, direct := run(series.IncrementalNever)
	s, auto := run(series.IncrementalAuto)
	t.Logf("from the reference: tracked %.3f, %.3f; auto: %s %.3f, %s %.3f", direct[0].Tracked, direct[1].Tracked, auto[0].Mode, auto[0].Tracked, auto[1].Mode, auto[1].Tracked)
	if direct[1].Tracked > 0.5 {
		t.Errorf("8 mm from the reference pair tracked %.2f of the points; the test needs a slide beyond the search", direct[1].Tracked)
	}
	if auto[0].Mode != series.ModeDirect || auto[1].Mode != series.ModeIncremental || auto[1].Tracked < 0.9 {
		t.Fatalf("auto: modes %s, %s, second frame tracked %.2f: want direct, then incremental keeping 90 %%", auto[0].Mode, auto[1].Mode, auto[1].Tracked)
	}
	m := auto[1].Mean
	t.Logf("incremental, 8 mm slide: u %.5f, v %.5f, w %.5f mm; E11 %.2g, E22 %.2g, E12 %.2g", m["u"], m["v"], m["w"], m["E11"], m["E22"], m["E12"])
	// The slide is along the world x axis and the specimen is turned 20°
	// about the vertical, so in the specimen frame it is 8 cos 20° in its
	// plane and 8 sin 20° out of it.
	c, sn := 8*math.Cos(20*math.Pi/180), 8*math.Sin(20*math.Pi/180)
	if math.Abs(math.Abs(m["u"])-c) > 0.01 || math.Abs(m["v"]) > 0.01 || math.Abs(math.Abs(m["w"])-sn) > 0.01 {
		t.Errorf("incremental: mean displacement u %.4f, v %.4f, w %.4f mm; want ±%.4f, 0, ±%.4f within 0.01 mm", m["u"], m["v"], m["w"], c, sn)
	}
	for _, q := range []string{"E11", "E22", "E12"} {
		if math.Abs(m[q]) > 2e-4 {
			t.Errorf("incremental: mean %s %.2g of a rigid slide, want below 2e-4", q, m[q])
		}
	}
	// Restored after the first frame, with its images, the series goes on
	// as the original.
	s1, err := New(ctx, rg, l0, r0, series.FrameMeta{Name: "ref"}, withROI(t, Params{Subset: 31, Step: 16, Incremental: series.IncrementalAlways}))
	if err != nil {
		t.Fatal(err)
	}
	if _, _, err := s1.Add(ctx, l1, r1, series.FrameMeta{}); err != nil {
		t.Fatal(err)
	}
	b, err := s1.MarshalState()
	if err != nil {
		t.Fatal(err)
	}
	st, err := UnmarshalState(b)
	if err != nil {
		t.Fatal(err)
	}
	again, err := Restore(rg, l0, r0, withROI(t, Params{Subset: 31, Step: 16, Incremental: series.IncrementalAlways}), st)
	if err != nil {
		t.Fatal(err)
	}
	if !again.NeedsPrevious() {
		t.Fatal("a restored incremental series does not ask for the previous pair")
	}
	if _, _, err := again.Add(ctx, l2, r2, series.FrameMeta{}); err == nil || !strings.Contains(err.Error(), "SetPrevious") {
		t.Errorf("incremental frame without the previous images: %v, want an error naming SetPrevious", err)
	}
	again.SetPrevious(l1, r1)
	_, ra, err := again.Add(ctx, l2, r2, series.FrameMeta{})
	if err != nil {
		t.Fatal(err)
	}
	_, ro, err := s1.Add(ctx, l2, r2, series.FrameMeta{})
	if err != nil {
		t.Fatal(err)
	}
	ja, _ := json.Marshal(ra)
	jo, _ := json.Marshal(ro)
	if !bytes.Equal(ja, jo) {
		t.Errorf("restored incremental series' frame differs from the original's:\n%s\n%s", ja, jo)
	}
	if st := s.State(); st.Last == nil || !st.Switched {
		t.Errorf("the state of an auto series that switched: last %v, switched %v; want both kept", st.Last != nil, st.Switched)
	}
}

// withROI is p restricted to the left ROI of the test through its mask.
func withROI(t *testing.T, p Params) Params {
	t.Helper()
	p.ROI = &roi.Spec{Rect: &[4]int{roiRect.Min.X, roiRect.Min.Y, roiRect.Max.X, roiRect.Max.Y}}
	return p
}

// TestBadParams: every problem of the parameters is reported at once,
// naming its field and what would work; a pair of different sizes is an
// error, not numbers.
func TestBadParams(t *testing.T) {
	bad := -1.0
	p := Params{StrainWindow: 4, Prefilter: &bad, Area: -2, StaticFrames: -1,
		Extensometers: []series.Extensometer{{Name: "a", A: [2]float64{10, 10}, B: [2]float64{900, 10}}, {Name: "a", A: [2]float64{5, 5}, B: [2]float64{5, 5}}},
		Gauges:        []series.Gauge{{Name: "g", Rect: &[4]float64{50, 50, 10, 60}, Components: []string{"E33"}}, {Name: "h"}},
		Properties:    series.PropsParams{Axial: "gauge:g:E12", Transverse: "nope"},
	}
	err := p.Validate(imW, imH)
	if err == nil {
		t.Fatal("want errors")
	}
	for _, want := range []string{"static_frames -1", "strain_window 4", "prefilter_px -1", "area_mm2 -2", "outside the 640×480", "a name of its own", "two distinct points",
		"x0 < x1", `component "E33"`, "gauges[1] (h): give a rect", "properties.axial \"gauge:g:E12\": component E12", `properties.transverse "nope"`} {
		if !strings.Contains(err.Error(), want) {
			t.Errorf("error %q lacks %q", err, want)
		}
	}
	_, _, rg := rig()
	_, err = New(context.Background(), rg, imageio.NewGray(imW, imH), imageio.NewGray(320, 240), series.FrameMeta{}, Params{})
	if err == nil || !strings.Contains(err.Error(), "same size") {
		t.Errorf("pair of different sizes: %v", err)
	}
}

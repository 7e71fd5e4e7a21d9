package series

import (
	"context"
	"math"
	"testing"

	"github.com/mottledic/mottle/internal/figures"
	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
	"github.com/mottledic/mottle/pkg/synth"
)

// The material law is INVENTED demo data (a fictitious sheet of the
// invented Brackwater Materials Lab), not a real material: synth's demo
// tensile law (synth.DemoTensileLaw, the one "mottle synth --test tensile"
// renders), linear elastic with E = 10 GPa and ν = 0.30 up to
// σ_y = 100 MPa, then linear hardening H = 500 MPa in engineering terms,
// with a plastic strain ratio r = 0.80 on a 20 mm² cross-section.
var law = synth.DemoTensileLaw()

const lawOff = 0.002

// renderFrames renders the reference and one frame per motion, all of the
// same speckle pattern of the given mean speckle diameter (px). With defocus > 0 the lens blur grows linearly from
// none in the reference to a Gaussian of σ = defocus px in the last frame,
// as when a thinning specimen drifts out of the focal plane, so that late
// frames look less and less like the reference while consecutive frames
// stay alike.
func renderFrames(t testing.TB, w, h int, diameter float64, ms []synth.Motion, defocus float64) (*imageio.Gray, []*imageio.Gray) {
	t.Helper()
	return renderFramesSeed(t, w, h, diameter, ms, defocus, 11)
}

// renderFramesSeed is renderFrames with the speckle pattern's seed.
func renderFramesSeed(t testing.TB, w, h int, diameter float64, ms []synth.Motion, defocus float64, seed int64) (*imageio.Gray, []*imageio.Gray) {
	t.Helper()
	all := append([]synth.Motion{synth.Identity{}}, ms...)
	var fr []synth.Frame
	for _, m := range all {
		fr = append(fr, synth.Frame{Motion: m})
	}
	bounds := synth.BoundsForSeries(fr, w, h, 12)
	p1, err := synth.NewPattern(synth.PatternOptions{Diameter: diameter, Seed: seed, Bounds: bounds})
	if err != nil {
		t.Fatal(err)
	}
	var imgs []*imageio.Gray
	for n, m := range all {
		ro := synth.RenderOptions{W: w, H: h, Bits: 12, Supersample: 3, Blur: defocus * float64(n) / float64(len(ms))}
		g, rep, err := synth.Render(p1, m, ro)
		if err != nil || rep.Failed > 0 {
			t.Fatalf("render frame %d: %v (%d failed samples)", n, err, rep.Failed)
		}
		imgs = append(imgs, g)
	}
	return imgs[0], imgs[1:]
}

// nSeeds is the number of speckle-pattern seeds of the published series
// figures.
const nSeeds = 8

// spread is one figure over the seeds: mean and worst.
type spread struct {
	sum, worst float64
	n          int
}

func (s *spread) add(v float64) {
	s.sum += v
	s.worst = math.Max(s.worst, v)
	s.n++
}

// check asserts the mean and the worst seed against the figures
// name+"/mean" and name+"/worst".
func (s *spread) check(t *testing.T, name string) {
	t.Helper()
	if s.n != nSeeds {
		t.Fatalf("%s: %d seeds measured, want %d", name, s.n, nSeeds)
	}
	figures.Check(t, name+"/mean", s.sum/float64(s.n))
	figures.Check(t, name+"/worst", s.worst)
}

// tensileRun renders 20 frames (the reference and 19 loaded frames) of a
// strip stretched along x by the invented law above, with the speckle
// pattern of the given seed, and returns the tracked curve.
func tensileRun(t *testing.T, seed int64, strains []float64) Curve {
	const W, H, cx, cy = 192, 128, 96.0, 64.0
	var ms []synth.Motion
	for _, e := range strains {
		ms = append(ms, law.Motion(e, cx, cy))
	}
	ref, imgs := renderFramesSeed(t, W, H, 4, ms, 0, seed)

	p := Defaults()
	p.Analysis.Subset, p.Analysis.Step = 21, 8
	p.Area = law.Area
	// Elastic displacements here are tenths of a pixel, where the
	// interpolation bias is nearly proportional to the shift (a gain error
	// of 1–3 % with cubic splines on these images, measured). Quintic
	// B-splines on lightly Gaussian-prefiltered images bring it to about
	// 0.2 % (prefiltering against bias: Pan 2013, "Bias error reduction of
	// digital image correlation using Gaussian pre-filtering", Opt. Lasers
	// Eng. 51:1161; reference from memory).
	p.Analysis.Interpolation = "quintic"
	p.Analysis.Prefilter = 0.8

	p.Extensometers = []Extensometer{
		{Name: "axial", A: [2]float64{cx - 60, cy}, B: [2]float64{cx + 60, cy}},
		{Name: "width", A: [2]float64{cx, cy - 40}, B: [2]float64{cx, cy + 40}},
	}
	// The strains for the properties come from a virtual gauge over the
	// middle of the strip (mean E11 and E22 of about 150 points, turned
	// into engineering strains); the two-point extensometers are checked
	// more loosely below, as they carry the random error of the few points
	// around their ends.
	p.Gauges = []Gauge{{Name: "mid", Rect: &[4]float64{cx - 64, cy - 40, cx + 64, cy + 40}}}
	p.Properties = PropsParams{Axial: "gauge:mid:E11", Transverse: "gauge:mid:E22",
		ModulusRange: [2]float64{0.0005, 0.0095}, RRange: [2]float64{0.02, 0.065}}
	zero := 0.0
	tr, err := New(ref, FrameMeta{Name: "ref", Load: &zero}, p)
	if err != nil {
		t.Fatal(err)
	}
	for n, im := range imgs {
		load := law.Stress(strains[n]) * law.Area
		fr, err := tr.Add(context.Background(), im, FrameMeta{Load: &load})
		if err != nil {
			t.Fatal(err)
		}
		if seed == 1 {
			ex := fr.Summary.Extensometers
			t.Logf("frame %2d %-11s axial %.6f (true %.6f, err %+.1e)  width %.6f (true %.6f, err %+.1e)  zncc %.4f",
				n+1, fr.Summary.Mode, ex[0].Eng, strains[n], ex[0].Eng-strains[n], ex[1].Eng, law.Width(strains[n]), ex[1].Eng-law.Width(strains[n]), fr.Summary.MeanZNCC)
		}
	}
	return tr.Curve()
}

// TestMaterialLawSeries tracks the rendered tensile series of tensileRun on
// 8 speckle patterns and checks the properties against the law: E (ASTM
// E111), ν (ASTM E132), the 0.2 % offset yield (ASTM E8/E8M) and r (ISO
// 10113). The offset-yield truth is the closed-form intersection of the
// offset line σ = E(ε − 0.002) with the hardening branch
// σ = σ_y + H(ε − σ_y/E). The relative errors from the gauge strains,
// mean and worst seed, are bounded at about 1.5× their measured values
// (internal/figures); those from the two-point extensometers, which carry
// the random error of the few points around their ends, within 2 % (4 %
// for r), the project's earlier target.
func TestMaterialLawSeries(t *testing.T) {
	strains := []float64{0.001, 0.002, 0.003, 0.004, 0.005, 0.006, 0.007, 0.008, 0.009, 0.010,
		0.0125, 0.015, 0.02, 0.025, 0.03, 0.035, 0.04, 0.05, 0.06}
	wantYield := law.OffsetYield(lawOff)
	var errs [4]spread
	names := []string{"E", "nu", "Rp0.2", "r"}
	for seed := int64(1); seed <= nSeeds; seed++ {
		c := tensileRun(t, seed, strains)
		props := func(source string) [4]float64 {
			pr := c.Properties()
			if pr.Modulus == nil || pr.Poisson == nil || pr.Yield == nil || pr.R == nil {
				t.Fatalf("seed %d %s: properties missing: %+v", seed, source, pr.Skipped)
			}
			got := [4]float64{pr.Modulus.E, pr.Poisson.Nu, pr.Yield.Stress, pr.R.R}
			want := [4]float64{law.E, law.Nu, wantYield, law.R}
			var rel [4]float64
			for i := range got {
				rel[i] = (got[i] - want[i]) / want[i]
				t.Logf("seed %d %s: %s = %.5g, law %.5g (%+.3f %%)", seed, source, names[i], got[i], want[i], 100*rel[i])
			}
			if seed == 1 {
				for _, l := range pr.Lines() {
					t.Logf("%s: %s: %s", source, l[0], l[1])
				}
			}
			return rel
		}
		for i, r := range props("gauge") {
			errs[i].add(100 * math.Abs(r))
		}
		c.Params.Properties.Axial, c.Params.Properties.Transverse = "axial", "width"
		for i, r := range props("extensometers") {
			if tol := map[bool]float64{false: 0.02, true: 0.04}[i == 3]; math.Abs(r) > tol {
				t.Errorf("seed %d extensometers: %s off by %+.2f %%, want within %.0f %%", seed, names[i], 100*r, 100*tol)
			}
		}
	}
	for i, n := range []string{"modulus", "poisson", "yield", "r"} {
		errs[i].check(t, "tensile/"+n)
	}
}

// TestIncrementalLargeStretch stretches a strip to λ = 1.4 in 10 frames
// (with λ₂ = 1/√λ across) while the image goes gradually out of focus, to
// a Gaussian blur of σ = 1.6 px on 3 px speckles in the last frame (an
// invented scenario: a thinning specimen drifting out of the focal plane),
// on 8 speckle patterns. Correlation with the sharp reference degrades and
// finally fails, the tracker goes incremental, every frame stays valid,
// and the errors of the final Green–Lagrange strains against the closed
// form E11 = ½(λ² − 1) = 0.48 and E22 = ½(λ₂² − 1), mean and worst seed,
// are bounded at about 1.5× their measured values (internal/figures).
func TestIncrementalLargeStretch(t *testing.T) {
	const W, H, cx, cy = 256, 128, 128.0, 64.0
	const frames = 10
	lam := func(n int) (float64, float64) {
		l := 1 + 0.4*float64(n)/float64(frames)
		return l, 1 / math.Sqrt(l) // area-preserving in 3D with equal lateral strains
	}
	var ms []synth.Motion
	for n := 1; n <= frames; n++ {
		l1, l2 := lam(n)
		ms = append(ms, synth.Affine{F: [2][2]float64{{l1, 0}, {0, l2}}, CX: cx, CY: cy})
	}
	var e11, e22 spread
	for seed := int64(1); seed <= nSeeds; seed++ {
		ref, imgs := renderFramesSeed(t, W, H, 3, ms, 1.6, seed+10)

		// The correlation settings of pkg/analysis (cubic, no prefilter):
		// the defocus low-passes the frames anyway. With the series
		// defaults (quintic, prefilter) direct correlation copes with more
		// blur, so the switch comes later and more of the blur-dependent
		// bias of the direct frames is carried into the composed result.
		p := Defaults()
		p.Analysis = analysis.Defaults()
		p.Analysis.Subset, p.Analysis.Step = 21, 6
		r := [4]int{int(cx) - 60, int(cy) - 44, int(cx) + 60, int(cy) + 44}
		p.Analysis.ROI = roiRect(r)
		p.Gauges = []Gauge{{Name: "centre", Rect: &[4]float64{cx - 42, cy - 26, cx + 42, cy + 26}, Components: []string{"E11", "E22"}}}
		p.Extensometers = []Extensometer{{Name: "axial", A: [2]float64{cx - 44, cy}, B: [2]float64{cx + 44, cy}}}
		tr, err := New(ref, FrameMeta{}, p)
		if err != nil {
			t.Fatal(err)
		}
		var last *Frame
		switched := 0
		for n, im := range imgs {
			fr, err := tr.Add(context.Background(), im, FrameMeta{})
			if err != nil {
				t.Fatal(err)
			}
			s := fr.Summary
			if seed == 1 {
				l1, _ := lam(n + 1)
				t.Logf("frame %2d %-11s tracked %.3f zncc %.4f E11 %.6f (true %.6f) ext %.6f", n+1, s.Mode, s.Tracked, s.MeanZNCC, s.Gauges[0].Mean, (l1*l1-1)/2, s.Extensometers[0].Stretch)
			}
			if s.Tracked < 0.98 || !s.Extensometers[0].Valid || s.Gauges[0].N == 0 {
				t.Errorf("seed %d frame %d (%s): tracked %.3f, extensometer valid %v, gauge points %d", seed, n+1, s.Mode, s.Tracked, s.Extensometers[0].Valid, s.Gauges[0].N)
			}
			if s.Mode == ModeIncremental && switched == 0 {
				switched = n + 1
			}
			last = fr
		}
		if switched == 0 {
			t.Fatalf("seed %d: the tracker never went incremental", seed)
		}
		l1, l2 := lam(frames)
		want11, want22 := (l1*l1-1)/2, (l2*l2-1)/2
		g := last.Summary.Gauges
		t.Logf("seed %d: switched at frame %d; final E11 %.6f (true %.6f, %+.1e), E22 %.6f (true %.6f, %+.1e)", seed, switched, g[0].Mean, want11, g[0].Mean-want11, g[1].Mean, want22, g[1].Mean-want22)
		e11.add(math.Abs(g[0].Mean - want11))
		e22.add(math.Abs(g[1].Mean - want22))
		// Direct correlation of the last frame with the reference, even
		// from the tracked solution, fails: that is why the incremental
		// path exists.
		d, err := tr.directStep(context.Background(), imgs[frames-1], tr.st.Points, &progress{})
		if err != nil {
			t.Fatal(err)
		}
		z, tracked := tr.quality(d)
		if tracked > 0.5 && z > p.SwitchZNCC {
			t.Errorf("seed %d: direct correlation of the last frame still works (tracked %.2f, ZNCC %.3f); the test does not exercise the incremental path", seed, tracked, z)
		}
	}
	e11.check(t, "incremental/E11")
	e22.check(t, "incremental/E22")
}

// TestVelocityRendered: a rendered translation at constant velocity
// (1.5, −0.8) px/s sampled at uneven times gives that Lagrangian velocity
// at every point and zero acceleration. The tolerance, 0.01 px/s over
// frame intervals of 2–3 s, allows for a displacement bias of a few
// thousandths of a pixel from intensity interpolation (Schreier, Braasch &
// Sutton 2000, Opt. Eng. 39(11):2915), which a pure translation shares at
// every point.
func TestVelocityRendered(t *testing.T) {
	const vx, vy = 1.5, -0.8
	times := []float64{0, 2, 5, 7}
	var ms []synth.Motion
	for _, tt := range times[1:] {
		ms = append(ms, synth.Translation{U: vx * tt, V: vy * tt})
	}
	ref, imgs := renderFrames(t, 128, 128, 4, ms, 0)
	p := Defaults()
	p.Analysis.Subset, p.Analysis.Step = 21, 8
	tr, err := New(ref, FrameMeta{Time: &times[0]}, p)
	if err != nil {
		t.Fatal(err)
	}
	for n, im := range imgs {
		fr, err := tr.Add(context.Background(), im, FrameMeta{Time: &times[n+1]})
		if err != nil {
			t.Fatal(err)
		}
		ok := make([]bool, len(fr.Status))
		for k := range ok {
			ok[k] = fr.Quantities["valid"][k] == 1
		}
		mu, su, _, _, nu := Stats(fr.Quantities["vel_u"], ok)
		mv, sv, _, _, _ := Stats(fr.Quantities["vel_v"], ok)
		t.Logf("frame %d: vel_u %.5f ± %.5f, vel_v %.5f ± %.5f px/s over %d points", n+1, mu, su, mv, sv, nu)
		if math.Abs(mu-vx) > 0.01 || math.Abs(mv-vy) > 0.01 || su > 0.02 || sv > 0.02 {
			t.Errorf("frame %d: velocity (%.4f ± %.4f, %.4f ± %.4f), want (%g, %g)", n+1, mu, su, mv, sv, vx, vy)
		}
		if n >= 1 {
			ma, _, _, _, _ := Stats(fr.Quantities["acc_u"], ok)
			if math.Abs(ma) > 0.01 {
				t.Errorf("frame %d: mean acceleration %.4f px/s², want 0", n+1, ma)
			}
		}
	}
}

func roiRect(r [4]int) *roi.Spec { return &roi.Spec{Rect: &r} }

// TestNoiseFloorStatic: three static frames of a rendered specimen with
// sensor noise (σ = 3 grey levels, 8 bit) give a noise floor (the
// stationary-image approach of the iDICs Good Practices Guide 2018) with a
// near-zero mean and a displacement std close to the random error the
// correlator predicts from the image gradients, σ_u ≈ √2·σ/√Σ(∂f/∂x)²
// (Wang, Li, Tong & Ruan 2007, Exp. Mech. 47:701): within a factor 1.5.
func TestNoiseFloorStatic(t *testing.T) {
	imgs := staticFrames(t, 128, 128, 4, 5, 1)
	// Without prefilter: the prediction assumes white noise, which a
	// Gaussian prefilter would correlate.
	p := Defaults()
	p.Analysis = analysis.Defaults()
	p.Analysis.Subset, p.Analysis.Step = 21, 8
	p.StaticFrames = 3
	tr, err := New(imgs[0], FrameMeta{}, p)
	if err != nil {
		t.Fatal(err)
	}
	var pred []float64
	for _, im := range imgs[1:] {
		fr, err := tr.Add(context.Background(), im, FrameMeta{})
		if err != nil {
			t.Fatal(err)
		}
		ok := make([]bool, len(fr.Status))
		for k := range ok {
			ok[k] = fr.Quantities["valid"][k] == 1
		}
		m, _, _, _, _ := Stats(fr.Quantities["std_u"], ok)
		pred = append(pred, m)
	}
	nf := tr.Curve().Noise
	if nf == nil || nf.Frames != 3 {
		t.Fatalf("noise floor %+v, want 3 static frames", nf)
	}
	predU := (pred[0] + pred[1] + pred[2]) / 3
	t.Logf("noise floor: std u %.4f px (predicted %.4f), v %.4f px, E11 %.2e, E22 %.2e; mean u %.1e px",
		nf.Std["u"], predU, nf.Std["v"], nf.Std["E11"], nf.Std["E22"], nf.Mean["u"])
	if r := nf.Std["u"] / predU; !(r > 1/1.5 && r < 1.5) {
		t.Errorf("noise floor std u %.4f px is %.2f× the predicted %.4f px", nf.Std["u"], r, predU)
	}
	if math.Abs(nf.Mean["u"]) > 3*nf.Std["u"] || nf.Std["E11"] <= 0 {
		t.Errorf("noise floor mean u %.2e, std E11 %.2e", nf.Mean["u"], nf.Std["E11"])
	}
}

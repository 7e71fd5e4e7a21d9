package props

import (
	"math"
	"strings"
	"testing"
)

func near(t *testing.T, name string, got, want, tol float64) {
	t.Helper()
	if math.IsNaN(got) || math.Abs(got-want) > tol {
		t.Errorf("%s = %.10g, want %.10g ± %g", name, got, want, tol)
	}
}

// TestModulusHandWorked checks the least-squares modulus of ASTM E111
// (slope of the least-squares line of stress against strain over the chosen
// range) on four points worked by hand:
//
//	strain x: 0.0005  0.0010  0.0015  0.0020     x̄ = 0.00125
//	stress y: 35.2    69.8    105.1   139.9      ȳ = 87.5 MPa
//	x − x̄:   −7.5e−4 −2.5e−4 +2.5e−4 +7.5e−4
//	y − ȳ:   −52.3   −17.7   +17.6   +52.4
//	Sxx = 2·(7.5e−4)² + 2·(2.5e−4)² = 1.125e−6 + 1.25e−7 = 1.25e−6
//	Sxy = 7.5e−4·52.3 + 2.5e−4·17.7 + 2.5e−4·17.6 + 7.5e−4·52.4
//	    = 0.039225 + 0.004425 + 0.0044 + 0.0393 = 0.08735
//	E   = Sxy/Sxx = 0.08735/1.25e−6 = 69 880 MPa
//	b   = ȳ − E·x̄ = 87.5 − 87.35 = 0.15 MPa
//	residuals y − (b + E·x): 35.2 − 35.09 = 0.11, 69.8 − 70.03 = −0.23,
//	    105.1 − 104.97 = 0.13, 139.9 − 139.91 = −0.01
//	SSE = 0.0121 + 0.0529 + 0.0169 + 0.0001 = 0.082
//	s_E = √(SSE/(n−2)/Sxx) = √(0.041/1.25e−6) = √32800 = 181.108 MPa
//	CV  = 100·181.108/69880 = 0.25917 %
//
// SciPy's scipy.stats.linregress (SciPy 1.10 via /usr/bin/python3) gives
// the same slope 69880, intercept 0.15 and stderr 181.1077.
func TestModulusHandWorked(t *testing.T) {
	strain := []float64{0, 0.0005, 0.0010, 0.0015, 0.0020, 0.004}
	stress := []float64{0, 35.2, 69.8, 105.1, 139.9, 200} // first and last outside the range
	m, err := YoungsModulus(strain, stress, 0.0004, 0.0021)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "E", m.E, 69880, 1e-6)
	near(t, "intercept", m.Fit.Intercept, 0.15, 1e-9)
	near(t, "toe strain", m.ToeStrain, -0.15/69880, 1e-15)
	near(t, "s_E", m.Fit.SlopeStdErr, math.Sqrt(32800), 1e-6)
	near(t, "CV %", m.Fit.SlopeCV, 100*math.Sqrt(32800)/69880, 1e-9)
	// ASTM E111's form of the coefficient of variation, from memory.
	near(t, "CV % (E111 form)", m.Fit.SlopeCV, 100*math.Sqrt((1/m.Fit.R2-1)/2), 1e-7)
	if m.Fit.N != 4 || m.Fit.XMin != 0.0005 || m.Fit.XMax != 0.002 {
		t.Errorf("fit used N=%d over [%g, %g], want 4 over [0.0005, 0.002]", m.Fit.N, m.Fit.XMin, m.Fit.XMax)
	}
}

// TestOffsetYieldHandWorked checks the 0.2 % offset method of ASTM E8/E8M
// and ISO 6892-1 (R_p0.2: stress where a line parallel to the elastic part,
// shifted by 0.002 strain, meets the curve) by hand. E = 70 000 MPa through
// the origin, offset line σ = 70 000·(ε − 0.002):
//
//	ε       σ curve   σ line   curve − line
//	0.004   260       140      +120
//	0.005   275       210      +65
//	0.006   285       280      +5
//	0.007   292       350      −58
//
// The sign changes between 0.006 and 0.007: t = 5/(5 + 58) = 5/63 =
// 0.0793651, ε = 0.006 + 0.001·t = 0.00607937, σ = 285 + 7·t = 285.5556 MPa
// (check on the line: 70 000·(0.00607937 − 0.002) = 285.556).
func TestOffsetYieldHandWorked(t *testing.T) {
	strain := []float64{0, 0.002, 0.004, 0.005, 0.006, 0.007, 0.010}
	stress := []float64{0, 140, 260, 275, 285, 292, 300}
	y, err := OffsetYield(strain, stress, Modulus{E: 70000}, 0.002)
	if err != nil {
		t.Fatal(err)
	}
	tt := 5.0 / 63
	near(t, "Rp0.2", y.Stress, 285+7*tt, 1e-9)
	near(t, "strain", y.Strain, 0.006+0.001*tt, 1e-12)
	near(t, "line check", 70000*(y.Strain-0.002), y.Stress, 1e-9)
	if y.Index != 4 {
		t.Errorf("bracket index %d, want 4", y.Index)
	}
	// With a toe: the same curve shifted by +0.0003 strain and an elastic
	// line with that intercept gives the same stress.
	shifted := make([]float64, len(strain))
	for i := range strain {
		shifted[i] = strain[i] + 0.0003
	}
	y2, err := OffsetYield(shifted, stress, Modulus{E: 70000, ToeStrain: 0.0003}, 0.002)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "Rp0.2 with toe", y2.Stress, y.Stress, 1e-9)
}

// TestRValueHandWorked checks r = ε_w/ε_t with ε_t = −(ε_l + ε_w) from
// volume constancy (ISO 10113, ASTM E517) on a strip by hand: gauge length
// L0 = 50 mm → L = 55 mm, width b0 = 20 mm → b = 19.2 mm, elastic part
// neglected:
//
//	ε_l = ln(55/50) = ln 1.1  = 0.0953102
//	ε_w = ln(19.2/20) = ln 0.96 = −0.0408220
//	ε_t = −(0.0953102 − 0.0408220) = −0.0544882
//	r   = −0.0408220 / −0.0544882 = 0.749190
func TestRValueHandWorked(t *testing.T) {
	near(t, "r point", RRatio(math.Log(1.1), math.Log(0.96)), 0.0408220/0.0544882, 2e-6)
	rv, err := PlasticStrainRatio([]float64{0.1}, []float64{-0.04}, []float64{300}, 0, 0, 0.05, 0.2)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "r", rv.R, 0.749190, 1e-6)
	if rv.Method != "point" {
		t.Errorf("method %q, want point", rv.Method)
	}
	// Regression form: ε_w = m·ε_l with m = −r/(1+r) gives back r exactly.
	const r = 0.749190
	var ax, wd, st []float64
	for _, e := range []float64{0.02, 0.05, 0.08, 0.12} {
		el := math.Log1p(e)
		ax = append(ax, e)
		wd = append(wd, math.Expm1(-r/(1+r)*el))
		st = append(st, 0)
	}
	rv, err = PlasticStrainRatio(ax, wd, st, 0, 0, 0.01, 0.2)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "r regression", rv.R, r, 1e-12)
	if rv.Method != "regression" || rv.Fit == nil || rv.Fit.N != 4 {
		t.Errorf("regression result %+v", rv)
	}
}

// TestElasticRemoval: with E and ν given, the elastic stretches 1 + σ/E
// and 1 − νσ/E are taken out before r is formed from the plastic strains
// (ISO 10113 and ASTM E517 define r on plastic strains); data built from
// the law must give back r = 0.8 exactly.
func TestElasticRemoval(t *testing.T) {
	// Invented law, demo data: E = 10 GPa, ν = 0.3, r = 0.8 in plasticity.
	const E, nu, r = 10000.0, 0.3, 0.8
	var ax, wd, st []float64
	for _, e := range []float64{0.02, 0.03, 0.04, 0.05} {
		s := 100 + 500*(e-0.01) // stress
		elp := math.Log1p(e) - math.Log1p(s/E)
		ewp := -r / (1 + r) * elp
		ew := ewp + math.Log1p(-nu*s/E)
		ax = append(ax, e)
		wd = append(wd, math.Expm1(ew))
		st = append(st, s)
	}
	rv, err := PlasticStrainRatio(ax, wd, st, E, nu, 0.015, 0.06)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "r", rv.R, r, 1e-12)
	if !rv.ElasticRemoved {
		t.Error("ElasticRemoved false")
	}
}

// TestPoissonAndUltimate: ν = −(slope of transverse against axial strain)
// (ASTM E132), here exactly 0.33 by construction; tensile strength Rm is the
// largest stress, Agt the total and Ag = Agt − Rm/E the plastic strain at it
// (ISO 6892-1 terms): 0.10 − 320/10000 = 0.068, worked by hand.
func TestPoissonAndUltimate(t *testing.T) {
	ax := []float64{0, 0.001, 0.002, 0.003, 0.004}
	tr := []float64{0, -0.00033, -0.00066, -0.00099, -0.00132}
	p, err := PoissonsRatio(ax, tr, 0.0005, 0.0045)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "nu", p.Nu, 0.33, 1e-12)
	near(t, "R2", p.Fit.R2, 1, 1e-12)

	u, err := UltimateStrength([]float64{0, 0.01, 0.05, 0.10, 0.12}, []float64{0, 100, 300, 320, 310}, 10000)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "Rm", u.Stress, 320, 0)
	near(t, "Agt", u.StrainAtMax, 0.10, 0)
	near(t, "Ag", u.PlasticStrainAtMax, 0.10-0.032, 1e-15)
	if u.AtEnd {
		t.Error("AtEnd true for an interior maximum")
	}
}

func TestErrors(t *testing.T) {
	tests := []struct {
		name string
		err  error
		want string
	}{
		{"few points", func() error { _, e := YoungsModulus([]float64{0.001, 0.002}, []float64{1, 2}, 0, 1); return e }(), "need at least 3"},
		{"bad range", func() error { _, e := YoungsModulus(nil, nil, 1, 0); return e }(), "lower < upper"},
		{"length", func() error { _, e := YoungsModulus([]float64{1}, nil, 0, 1); return e }(), "lengths differ"},
		{"negative", func() error {
			_, e := YoungsModulus([]float64{1, 2, 3}, []float64{3, 2, 1}, 0, 4)
			return e
		}(), "not positive"},
		{"no yield", func() error {
			_, e := OffsetYield([]float64{0, 0.001}, []float64{0, 70}, Modulus{E: 70000}, 0.002)
			return e
		}(), "never falls below"},
		{"nan", func() error { _, e := FitLine([]float64{0, math.NaN()}, []float64{0, 1}); return e }(), "not finite"},
		{"same x", func() error { _, e := FitLine([]float64{1, 1}, []float64{0, 1}); return e }(), "distinct"},
		{"no r points", func() error {
			_, e := PlasticStrainRatio([]float64{0.1}, []float64{-0.04}, []float64{0}, 0, 0, 0.2, 0.3)
			return e
		}(), "no points"},
	}
	for _, tc := range tests {
		if tc.err == nil || !strings.Contains(tc.err.Error(), tc.want) {
			t.Errorf("%s: error %v, want it to mention %q", tc.name, tc.err, tc.want)
		}
	}
}

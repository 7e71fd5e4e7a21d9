package synth

import (
	"math"
	"strings"
	"testing"
)

// TestTensileLawHandWorked checks the invented law at one plastic point
// against arithmetic done by hand (values to 6 figures), and the two
// constraints that define it: plastic volume constancy,
// ε_l^p + ε_w^p + ε_t^p = 0, and r = ε_w^p/ε_t^p (ISO 10113), both
// recomputed from the engineering strains the way an analysis would.
//
// Demo law (invented): E = 10000 MPa, ν = 0.3, σ_y = 100 MPa, H = 500 MPa,
// r = 0.8. At e = 0.05:
//
//	σ      = 100 + 500·(0.05 − 0.01)            = 120 MPa
//	ε_l^p  = ln 1.05 − ln(1 + 120/10000)
//	       = 0.0487902 − 0.0119286              = 0.0368616
//	ε_w^p  = −0.8/1.8 · 0.0368616               = −0.0163829
//	ε_t^p  = −1/1.8 · 0.0368616                 = −0.0204787
//	e_w    = exp(ln(1 − 0.3·0.012) + ε_w^p) − 1 = exp(−0.0036065 − 0.0163829) − 1 = −0.0197910
//	e_t    = exp(−0.0036065 − 0.0204787) − 1    = −0.0237974
//
// The 0.2 % offset yield (ASTM E8/E8M, ISO 6892-1): the offset line
// σ = 10000·(e − 0.002) meets σ = 100 + 500·(e − 0.01) at
// e* = (100 − 5 + 20)/9500 = 0.0121053, so Rp0.2 = 10000·0.0101053 = 101.053 MPa.
func TestTensileLawHandWorked(t *testing.T) {
	l := DemoTensileLaw()
	if err := l.Validate(); err != nil {
		t.Fatal(err)
	}
	near := func(name string, got, want, tol float64) {
		t.Helper()
		if math.Abs(got-want) > tol {
			t.Errorf("%s = %.7g, want %.7g (±%g)", name, got, want, tol)
		}
	}
	s := l.State(0.05)
	near("stress", s.Stress, 120, 1e-12)
	near("load", s.Load, 2400, 1e-9)
	near("plastic axial", s.PlasticAxial, 0.0368616, 1e-7)
	near("plastic width", s.PlasticWidth, -0.0163829, 1e-7)
	near("plastic thickness", s.PlasticThickness, -0.0204787, 1e-7)
	near("width", s.Width, -0.0197910, 1e-7)
	near("thickness", s.Thickness, -0.0237974, 1e-7)
	near("Rp0.2", l.OffsetYield(0.002), 101.053, 1e-3)

	for _, e := range []float64{0.0005, 0.004, 0.01, 0.0125, 0.03, 0.2} {
		s := l.State(e)
		el := math.Log1p(e) - math.Log1p(s.Stress/l.E)
		ew := math.Log1p(s.Width) - math.Log1p(-l.Nu*s.Stress/l.E)
		et := math.Log1p(s.Thickness) - math.Log1p(-l.Nu*s.Stress/l.E)
		if math.Abs(el+ew+et) > 1e-12 {
			t.Errorf("e = %g: plastic strains %g + %g + %g do not sum to zero", e, el, ew, et)
		}
		if e <= l.YieldStrain() {
			near("elastic width strain −νe", s.Width, -l.Nu*e, 1e-15)
			near("elastic stress Ee", s.Stress, l.E*e, 1e-12)
		} else {
			near("r = ε_w^p/ε_t^p", ew/et, l.R, 1e-9)
		}
	}
}

// TestTensileSchedule: the schedule rises monotonically past yield, puts a
// frame exactly at the yield strain and ends at the final strain.
func TestTensileSchedule(t *testing.T) {
	l := DemoTensileLaw()
	for _, n := range []int{2, 3, 19, 20} {
		s, err := l.Schedule(n, 0.06)
		if err != nil {
			t.Fatal(err)
		}
		if len(s) != n || s[len(s)-1] != 0.06 || s[(n+1)/2-1] != l.YieldStrain() {
			t.Errorf("n = %d: schedule %v", n, s)
		}
		for i := 1; i < n; i++ {
			if !(s[i] > s[i-1]) {
				t.Errorf("n = %d: strain %d (%g) does not exceed strain %d (%g)", n, i, s[i], i-1, s[i-1])
			}
		}
	}
	for _, c := range []struct {
		n    int
		max  float64
		want string
	}{{1, 0.06, "at least 2"}, {10, 0.005, "final strain"}, {10, math.NaN(), "final strain"}} {
		if _, err := l.Schedule(c.n, c.max); err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("Schedule(%d, %g): error %v, want one mentioning %q", c.n, c.max, err, c.want)
		}
	}
	bad := TensileLaw{E: -1, Nu: 0.5, Yield: 0, Hardening: -1, R: 0, Area: 0}
	err := bad.Validate()
	for _, w := range []string{"modulus", "Poisson", "yield", "hardening", "r value", "cross-section"} {
		if err == nil || !strings.Contains(err.Error(), w) {
			t.Errorf("Validate of %+v: %v; want a problem about %s", bad, err, w)
		}
	}
}

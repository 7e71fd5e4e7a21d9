package synth

import (
	"errors"
	"fmt"
	"math"
)

// TensileLaw is an INVENTED uniaxial material law for demonstration
// series and tests (demo data of the invented Brackwater Materials Lab,
// not a real material): linear elastic up to the yield stress, then linear
// hardening, with a constant plastic strain ratio r. Stresses are
// engineering stresses σ = F/A₀ and strains engineering strains, as a
// tensile test reports them.
//
// The gauge section deforms homogeneously, loaded along x (the image's
// axis 1), with width along y (axis 2) and thickness out of the image
// plane. At axial engineering strain e the law gives:
//
//	stress            σ(e) = E·e                      for e ≤ e_y = σ_y/E
//	                  σ(e) = σ_y + H·(e − e_y)        beyond
//	elastic stretches λ_l^e = 1 + σ/E,  λ_w^e = λ_t^e = 1 − ν·σ/E
//	                  (isotropic Hooke's law under uniaxial stress)
//	plastic strains   ε_l^p = ln(1 + e) − ln λ_l^e   (true strains, the
//	                  total stretch being λ = λ^e·λ^p along each axis)
//	                  ε_w^p = −r/(1 + r)·ε_l^p,  ε_t^p = −1/(1 + r)·ε_l^p
//	width, thickness  1 + e_w = λ_w^e·exp(ε_w^p),  1 + e_t = λ_t^e·exp(ε_t^p)
//
// The plastic strains keep the volume, ε_l^p + ε_w^p + ε_t^p = 0, and their
// ratio is r = ε_w^p/ε_t^p, the plastic strain ratio of ISO 10113 (and
// ASTM E517); taking the elastic stretches out multiplicatively is how
// pkg/series/props.PlasticStrains recovers ε^p (common practice for small
// elastic strains). In the elastic range e_w = −ν·e exactly, so Poisson's
// ratio from transverse against axial strain (ASTM E132) is ν, and the
// slope of σ against e (ASTM E111) is E.
type TensileLaw struct {
	// E is Young's modulus in MPa. Default 10000.
	E float64 `json:"E_MPa"`
	// Nu is Poisson's ratio, in (−1, 0.5). Default 0.30.
	Nu float64 `json:"nu"`
	// Yield is the stress σ_y in MPa where the linear range ends. Default 100.
	Yield float64 `json:"yield_MPa"`
	// Hardening is the slope H = dσ/de beyond yield in MPa, in [0, E).
	// Default 500.
	Hardening float64 `json:"hardening_MPa"`
	// R is the plastic strain ratio r = ε_w^p/ε_t^p (ISO 10113), > 0.
	// Default 0.80.
	R float64 `json:"r"`
	// Area is the initial cross-section A₀ in mm² (load in N = σ·A₀).
	// Default 20, an invented 10 mm × 2 mm strip.
	Area float64 `json:"area_mm2"`
}

// DemoTensileLaw returns the law with every default: E = 10 GPa, ν = 0.30,
// σ_y = 100 MPa, H = 500 MPa, r = 0.80, A₀ = 20 mm² (invented values).
func DemoTensileLaw() TensileLaw {
	return TensileLaw{E: 10000, Nu: 0.30, Yield: 100, Hardening: 500, R: 0.80, Area: 20}
}

// Validate reports every problem with the law at once.
func (l TensileLaw) Validate() error {
	var errs []error
	bad := func(v float64) bool { return math.IsNaN(v) || math.IsInf(v, 0) }
	if bad(l.E) || l.E <= 0 {
		errs = append(errs, fmt.Errorf("tensile law: modulus E = %g MPa: use a positive value, e.g. 200000 for a steel", l.E))
	}
	if bad(l.Nu) || l.Nu <= -1 || l.Nu >= 0.5 {
		errs = append(errs, fmt.Errorf("tensile law: Poisson's ratio %g: use a value in (−1, 0.5), e.g. 0.3", l.Nu))
	}
	if bad(l.Yield) || l.Yield <= 0 {
		errs = append(errs, fmt.Errorf("tensile law: yield stress %g MPa: use a positive value", l.Yield))
	}
	if bad(l.Hardening) || l.Hardening < 0 || (l.E > 0 && l.Hardening >= l.E) {
		errs = append(errs, fmt.Errorf("tensile law: hardening modulus %g MPa: use a value ≥ 0 and below E = %g MPa", l.Hardening, l.E))
	}
	if bad(l.R) || l.R <= 0 {
		errs = append(errs, fmt.Errorf("tensile law: r value %g: use a positive plastic strain ratio, e.g. 0.8 or 1.8", l.R))
	}
	if bad(l.Area) || l.Area <= 0 {
		errs = append(errs, fmt.Errorf("tensile law: cross-section %g mm²: use a positive area", l.Area))
	}
	if len(errs) == 0 && l.Yield/l.E*l.Nu >= 1 {
		errs = append(errs, fmt.Errorf("tensile law: ν·σ_y/E = %g leaves no width at yield; lower the yield stress or ν", l.Nu*l.Yield/l.E))
	}
	return errors.Join(errs...)
}

// YieldStrain returns e_y = σ_y/E, the axial strain where the linear range
// ends.
func (l TensileLaw) YieldStrain() float64 { return l.Yield / l.E }

// Stress returns the engineering stress in MPa at axial engineering strain e.
func (l TensileLaw) Stress(e float64) float64 {
	if e <= l.YieldStrain() {
		return l.E * e
	}
	return l.Yield + l.Hardening*(e-l.YieldStrain())
}

// PlasticAxial returns the true plastic axial strain ε_l^p at axial
// engineering strain e (zero, up to rounding, in the elastic range).
func (l TensileLaw) PlasticAxial(e float64) float64 {
	if e <= l.YieldStrain() {
		return 0
	}
	return math.Log1p(e) - math.Log1p(l.Stress(e)/l.E)
}

// Width returns the engineering strain across the specimen (axis 2) at
// axial engineering strain e (see TensileLaw).
func (l TensileLaw) Width(e float64) float64 {
	s := l.Stress(e)
	return math.Expm1(math.Log1p(-l.Nu*s/l.E) - l.R/(1+l.R)*l.PlasticAxial(e))
}

// Thickness returns the engineering strain through the thickness (out of
// the image plane) at axial engineering strain e (see TensileLaw).
func (l TensileLaw) Thickness(e float64) float64 {
	s := l.Stress(e)
	return math.Expm1(math.Log1p(-l.Nu*s/l.E) - 1/(1+l.R)*l.PlasticAxial(e))
}

// OffsetYield returns the offset yield strength in MPa (Rp0.2 for offset
// 0.002): the stress where the line σ = E·(e − offset) meets the curve
// (ASTM E8/E8M, ISO 6892-1). With offset > 0 it lies on the hardening
// branch, σ_y + H·(e* − e_y) = E·(e* − offset), so
// e* = (σ_y − H·e_y + E·offset)/(E − H) and the strength is E·(e* − offset).
func (l TensileLaw) OffsetYield(offset float64) float64 {
	ey := l.YieldStrain()
	es := (l.Yield - l.Hardening*ey + l.E*offset) / (l.E - l.Hardening)
	return l.E * (es - offset)
}

// Motion returns the homogeneous motion of the gauge section at axial
// engineering strain e: F = diag(1 + e, 1 + e_w) about the centre
// (cx, cy) in px, which stays in place.
func (l TensileLaw) Motion(e, cx, cy float64) Affine {
	return Affine{F: [2][2]float64{{1 + e, 0}, {0, 1 + l.Width(e)}}, CX: cx, CY: cy}
}

// Schedule returns the axial engineering strains of n frames of
// increasing load that go past yield to maxStrain: the first ⌈n/2⌉ frames
// evenly over the linear range, the last of them exactly at the yield
// strain e_y (so that the curve's kink is a frame and the 0.2 % offset
// line meets a straight segment of the hardening branch), then the rest
// evenly from e_y to maxStrain. It needs n ≥ 2 and maxStrain > e_y.
func (l TensileLaw) Schedule(n int, maxStrain float64) ([]float64, error) {
	if err := l.Validate(); err != nil {
		return nil, err
	}
	ey := l.YieldStrain()
	var errs []error
	if n < 2 {
		errs = append(errs, fmt.Errorf("tensile schedule: %d frames: use at least 2 (one in the linear range, one past yield); 19 gives a good curve", n))
	}
	if !(maxStrain > ey) || math.IsInf(maxStrain, 0) || maxStrain >= 1 {
		errs = append(errs, fmt.Errorf("tensile schedule: final strain %g: use a value between the yield strain %g and 1, e.g. %g", maxStrain, ey, math.Min(6*ey, 0.5)))
	}
	if err := errors.Join(errs...); err != nil {
		return nil, err
	}
	ne := (n + 1) / 2
	np := n - ne
	out := make([]float64, 0, n)
	for k := 1; k <= ne; k++ {
		out = append(out, ey*float64(k)/float64(ne))
	}
	for k := 1; k <= np; k++ {
		out = append(out, ey+(maxStrain-ey)*float64(k)/float64(np))
	}
	return out, nil
}

// TensileState is the true state of the gauge section at one frame.
type TensileState struct {
	// Frame is the frame index (0 = reference) and File its image.
	Frame int    `json:"frame"`
	File  string `json:"file,omitempty"`
	// Time in s and Load in N (σ·A₀).
	Time float64 `json:"time_s"`
	Load float64 `json:"load_N"`
	// Stress is the engineering stress in MPa.
	Stress float64 `json:"stress_MPa"`
	// Axial, Width and Thickness are engineering strains.
	Axial     float64 `json:"axial_eng"`
	Width     float64 `json:"width_eng"`
	Thickness float64 `json:"thickness_eng"`
	// TrueAxial, TrueWidth and TrueThickness are true (logarithmic) strains.
	TrueAxial     float64 `json:"axial_true"`
	TrueWidth     float64 `json:"width_true"`
	TrueThickness float64 `json:"thickness_true"`
	// PlasticAxial, PlasticWidth and PlasticThickness are the true plastic
	// strains; they sum to zero.
	PlasticAxial     float64 `json:"axial_plastic_true"`
	PlasticWidth     float64 `json:"width_plastic_true"`
	PlasticThickness float64 `json:"thickness_plastic_true"`
	// E11 and E22 are the in-plane Green–Lagrange strains ½(λ² − 1).
	E11 float64 `json:"E11"`
	E22 float64 `json:"E22"`
}

// State returns the true state at axial engineering strain e.
func (l TensileLaw) State(e float64) TensileState {
	s := l.Stress(e)
	w, t := l.Width(e), l.Thickness(e)
	pl := l.PlasticAxial(e)
	return TensileState{
		Load: s * l.Area, Stress: s,
		Axial: e, Width: w, Thickness: t,
		TrueAxial: math.Log1p(e), TrueWidth: math.Log1p(w), TrueThickness: math.Log1p(t),
		PlasticAxial: pl, PlasticWidth: -l.R / (1 + l.R) * pl, PlasticThickness: -1 / (1 + l.R) * pl,
		E11: e + e*e/2, E22: w + w*w/2,
	}
}

// TensileTruth is the truth of a rendered tensile test, as written to
// truth.json: the invented law, the properties a series analysis should
// find, and the true state of every frame.
type TensileTruth struct {
	// Invented is always true: the specimen and its law are demo data.
	Invented bool `json:"invented"`
	// Description says what was rendered, in words.
	Description string `json:"description"`
	// Law is the material law and cross-section.
	Law TensileLaw `json:"law"`
	// Modulus, Poisson, OffsetYield and R are the true properties: E in
	// MPa (ASTM E111), ν (ASTM E132), Rp0.2 in MPa (ASTM E8/E8M, ISO
	// 6892-1) at Offset, and r (ISO 10113).
	Modulus     float64 `json:"youngs_modulus_MPa"`
	Poisson     float64 `json:"poissons_ratio"`
	Offset      float64 `json:"offset"`
	OffsetYield float64 `json:"offset_yield_MPa"`
	R           float64 `json:"r_value"`
	// YieldStrain is σ_y/E, where the linear range ends.
	YieldStrain float64 `json:"yield_strain"`
	// Frames holds the reference (frame 0) and every loaded frame.
	Frames []TensileState `json:"frames"`
}

// Truth returns the tensile truth for the given frame states (the
// reference first), with the offset yield at offset 0.002.
func (l TensileLaw) Truth(frames []TensileState) TensileTruth {
	return TensileTruth{
		Invented: true,
		Description: "INVENTED tensile coupon (demo data, not a real material): homogeneous uniaxial tension along x of the gauge section, " +
			"linear elastic then linear hardening in engineering stress and strain, constant plastic strain ratio r; the images show the middle of the gauge section",
		Law: l, Modulus: l.E, Poisson: l.Nu, Offset: 0.002, OffsetYield: l.OffsetYield(0.002), R: l.R,
		YieldStrain: l.YieldStrain(), Frames: frames,
	}
}

package series

import (
	"fmt"
	"math"
	"strings"

	"github.com/mottledic/mottle/pkg/series/props"
)

// Properties are the material properties derived from a curve, each with
// the range and fit quality it came from (see pkg/series/props). A nil
// entry was not computed; Skipped says why.
type Properties struct {
	// Axial and Transverse name the extensometers used.
	Axial      string `json:"axial,omitempty"`
	Transverse string `json:"transverse,omitempty"`
	// StressUnit is "MPa"; strains are dimensionless.
	StressUnit string          `json:"stress_unit"`
	Modulus    *props.Modulus  `json:"youngs_modulus,omitempty"`
	Poisson    *props.Poisson  `json:"poissons_ratio,omitempty"`
	Yield      *props.Yield    `json:"offset_yield,omitempty"`
	Ultimate   *props.Ultimate `json:"ultimate,omitempty"`
	R          *props.RValue   `json:"r_value,omitempty"`
	// Skipped lists, per property, why it was not computed.
	Skipped map[string]string `json:"skipped,omitempty"`
}

// extColumn returns, for every row, the engineering strain of a strain
// source (see PropsParams.Axial): an extensometer's l/L − 1, or a gauge's
// mean component converted to the engineering strain of a stretch along
// that axis without shear: √(1 + 2E) − 1 for Green–Lagrange, e^H − 1 for
// Hencky, ε for small strain. NaN where invalid.
func (c Curve) extColumn(name string) []float64 {
	g, comp, ok := gaugeSource(name)
	if !ok {
		return c.Column("ext_" + name + "_eng")
	}
	col := c.Column("gauge_" + g + "_" + comp + "_mean")
	for i, v := range col {
		switch comp[0] {
		case 'E':
			col[i] = math.Sqrt(1+2*v) - 1
		case 'H':
			col[i] = math.Expm1(v)
		}
	}
	return col
}

// gaugeSource splits a strain source "gauge:NAME:COMPONENT".
func gaugeSource(s string) (gauge, comp string, ok bool) {
	rest, ok := strings.CutPrefix(s, "gauge:")
	if !ok {
		return "", "", false
	}
	i := strings.LastIndex(rest, ":")
	if i <= 0 {
		return "", "", false
	}
	return rest[:i], rest[i+1:], true
}

// sourceComponents are the gauge components a strain source may use.
var sourceComponents = map[string]bool{"E11": true, "E22": true, "H11": true, "H22": true, "eps11": true, "eps22": true}

// Properties computes the material properties selected by the curve's
// Params.Properties. Rows without a stress or an axial strain are left out.
// It never fails: a property that cannot be computed is listed in Skipped
// with the reason.
func (c Curve) Properties() Properties {
	pp := c.Params.withDefaults().Properties
	out := Properties{Axial: pp.Axial, Transverse: pp.Transverse, StressUnit: "MPa", Skipped: map[string]string{}}
	skip := func(what, why string) { out.Skipped[what] = why }
	if pp.Axial == "" {
		for _, k := range []string{"youngs_modulus", "poissons_ratio", "offset_yield", "ultimate", "r_value"} {
			skip(k, "no axial extensometer defined")
		}
		return out
	}
	stressAll := c.Column("stress_MPa")
	axAll := c.extColumn(pp.Axial)
	var trAll []float64
	if pp.Transverse != "" {
		trAll = c.extColumn(pp.Transverse)
	}
	var ax, st, tr []float64
	for i := range c.Rows {
		if c.Rows[i].Static && c.Rows[i].Mode != ModeReference {
			continue // static frames repeat the origin
		}
		if !finite(stressAll[i], axAll[i]) {
			continue
		}
		if trAll != nil && !finite(trAll[i]) {
			continue
		}
		ax = append(ax, axAll[i])
		st = append(st, stressAll[i])
		if trAll != nil {
			tr = append(tr, trAll[i])
		}
	}
	if len(st) == 0 {
		why := "no frame has both a stress (load and area_mm2) and a valid axial strain"
		for _, k := range []string{"youngs_modulus", "poissons_ratio", "offset_yield", "ultimate", "r_value"} {
			skip(k, why)
		}
		return out
	}
	E := 0.0
	if pp.ModulusRange == [2]float64{} {
		skip("youngs_modulus", "properties.modulus_range not set")
		skip("offset_yield", "needs Young's modulus")
	} else if m, err := props.YoungsModulus(ax, st, pp.ModulusRange[0], pp.ModulusRange[1]); err != nil {
		skip("youngs_modulus", err.Error())
		skip("offset_yield", "needs Young's modulus")
	} else {
		out.Modulus, E = &m, m.E
		if y, err := props.OffsetYield(ax, st, m, pp.Offset); err != nil {
			skip("offset_yield", err.Error())
		} else {
			out.Yield = &y
		}
	}
	if u, err := props.UltimateStrength(ax, st, E); err != nil {
		skip("ultimate", err.Error())
	} else {
		out.Ultimate = &u
	}
	nu := 0.0
	switch {
	case tr == nil:
		skip("poissons_ratio", "no transverse extensometer (properties.transverse)")
	case pp.PoissonRange == [2]float64{}:
		skip("poissons_ratio", "properties.poisson_range (or modulus_range) not set")
	default:
		if p, err := props.PoissonsRatio(ax, tr, pp.PoissonRange[0], pp.PoissonRange[1]); err != nil {
			skip("poissons_ratio", err.Error())
		} else {
			out.Poisson, nu = &p, p.Nu
		}
	}
	switch {
	case tr == nil:
		skip("r_value", "no transverse extensometer (properties.transverse)")
	case pp.RRange == [2]float64{}:
		skip("r_value", "properties.r_range not set")
	default:
		if E > 0 && out.Poisson == nil {
			E = 0 // remove no elastic part rather than a wrong one
		}
		if r, err := props.PlasticStrainRatio(ax, tr, st, E, nu, pp.RRange[0], pp.RRange[1]); err != nil {
			skip("r_value", err.Error())
		} else {
			out.R = &r
		}
	}
	if len(out.Skipped) == 0 {
		out.Skipped = nil
	}
	return out
}

// Lines returns the properties as human-readable lines (value, range, fit
// quality), as used in the report and the CLI summary.
func (p Properties) Lines() [][2]string {
	var out [][2]string
	add := func(k, f string, a ...any) { out = append(out, [2]string{k, fmt.Sprintf(f, a...)}) }
	if m := p.Modulus; m != nil {
		add("Young's modulus (ASTM E111)", "E = %.4g MPa from %d points, axial strain %.4g–%.4g (requested %.4g–%.4g); R² = %.6f, slope CV %.3g %%",
			m.E, m.Fit.N, m.Fit.XMin, m.Fit.XMax, m.Lo, m.Hi, m.Fit.R2, m.Fit.SlopeCV)
	}
	if y := p.Yield; y != nil {
		add(fmt.Sprintf("Offset yield, %.3g %% (ASTM E8/E8M, ISO 6892-1)", 100*y.Offset), "R = %.4g MPa at strain %.5f (line E = %.4g MPa from strain %.3g)",
			y.Stress, y.Strain, y.E, y.ToeStrain+y.Offset)
	}
	if u := p.Ultimate; u != nil {
		note := ""
		if u.AtEnd {
			note = " (maximum at the last frame: the test may have stopped before necking; lower bound)"
		}
		ag := fmt.Sprintf("Ag = %.4g %%", 100*u.PlasticStrainAtMax)
		switch {
		case p.Modulus == nil:
			ag = "Ag not computed (Ag = Agt − Rm/E needs Young's modulus: set the modulus range)"
		case u.PlasticStrainAtMax <= 0:
			// Ag = Agt − Rm/E: a curve that stayed elastic has none, and a
			// small negative value is measurement noise, not a contraction.
			ag = fmt.Sprintf("Ag = 0 %% (computed %.2g %%: the curve stayed elastic up to Rm, within the noise)", 100*u.PlasticStrainAtMax)
		}
		add("Ultimate strength, uniform elongation (ISO 6892-1)", "Rm = %.4g MPa at curve row %d; Agt = %.4g %%, %s%s",
			u.Stress, u.Index, 100*u.StrainAtMax, ag, note)
	}
	if n := p.Poisson; n != nil {
		add("Poisson's ratio (ASTM E132)", "ν = %.4f from %d points, axial strain %.4g–%.4g; R² = %.6f, slope CV %.3g %%",
			n.Nu, n.Fit.N, n.Fit.XMin, n.Fit.XMax, n.Fit.R2, n.Fit.SlopeCV)
	}
	if r := p.R; r != nil {
		q := ""
		if r.Fit != nil {
			q = fmt.Sprintf(" from %d points; R² = %.6f", r.Fit.N, r.Fit.R2)
		}
		el := "elastic strains not removed"
		if r.ElasticRemoved {
			el = "elastic strains removed with E and ν"
		}
		add("Plastic strain ratio r (ISO 10113, ASTM E517)", "r = %.4f (%s, axial strain %.4g–%.4g%s; %s)", r.R, r.Method, r.Lo, r.Hi, q, el)
	}
	return out
}

// Package demo is Mottle's built-in demo scenario: an invented specimen
// rendered exactly by pkg/synth, with the parameters to analyse it and the
// comparison of the result with the known truth.
//
// The specimen, the lab and the material are invented for the demo; they
// are not data of any real test.
package demo

import (
	"context"
	"fmt"
	"io"
	"math"
	"strings"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/kinematics"
	"github.com/mottledic/mottle/pkg/roi"
	"github.com/mottledic/mottle/pkg/synth"
)

// Scenario describes the demo specimen. All of it is invented.
type Scenario struct {
	Lab, Specimen, Material string
	W, H                    int     // image size, px
	MMPerPx                 float64 // image scale
	E, Nu                   float64 // Young's modulus (MPa) and Poisson's ratio of the invented material
	Stress                  float64 // remote stress along x, MPa
	Radius                  float64 // hole radius, px
	Speckle                 float64 // mean speckle diameter, px
	Noise                   float64 // camera noise σ, grey levels (8-bit)
	Seed                    int64
}

// Default returns the built-in demo: specimen BW-PH-07 of the invented
// Brackwater Materials Lab, a plate of an invented glassy polymer with a
// 6 mm hole, pulled along x to a remote stress of 30 MPa.
func Default() Scenario {
	return Scenario{
		Lab:      "Brackwater Materials Lab (invented)",
		Specimen: "BW-PH-07, plate with a central hole (invented)",
		Material: "BX-3 glassy polymer (invented: E = 3.1 GPa, ν = 0.36)",
		W:        512, H: 384,
		MMPerPx: 0.05,
		E:       3100, Nu: 0.36,
		Stress:  30,
		Radius:  60,
		Speckle: 5,
		Noise:   1.5,
		Seed:    2026,
	}
}

// Motion returns the exact motion of the demo: the Kirsch plate-with-a-hole
// field in plane stress (pkg/synth.Hole).
func (s Scenario) Motion() synth.Hole {
	return synth.Hole{E: s.E, Nu: s.Nu, Radius: s.Radius, Stress: s.Stress, MMPerPx: s.MMPerPx, CX: float64(s.W-1) / 2, CY: float64(s.H-1) / 2}
}

// Params returns the analysis parameters for the demo: subset 31 px, step
// 8 px, strain window 5, the scale of the scenario, and a ROI that leaves out
// the hole.
func (s Scenario) Params() analysis.Params {
	p := analysis.Defaults()
	p.Subset, p.Step, p.StrainWindow = 31, 8, 5
	p.MMPerPx = s.MMPerPx
	m := s.Motion()
	const n = 72
	hole := make([][2]float64, n)
	for i := range hole {
		a := 2 * math.Pi * float64(i) / n
		// One pixel beyond the edge, so no subset sees into the hole.
		hole[i] = [2]float64{m.CX + (s.Radius+1)*math.Cos(a), m.CY + (s.Radius+1)*math.Sin(a)}
	}
	rect := [4]int{0, 0, s.W, s.H}
	p.ROI = &roi.Spec{Rect: &rect, Holes: [][][2]float64{hole}}
	return p
}

// Render renders the reference and the deformed image of the scenario as
// 8-bit images with camera noise.
func (s Scenario) Render() (ref, def *imageio.Gray, err error) {
	ref, def, err = synth.Pair(
		synth.PatternOptions{Diameter: s.Speckle, Coverage: 0.5, EdgeBlur: 1, Seed: s.Seed},
		s.Motion(),
		synth.RenderOptions{W: s.W, H: s.H, Bits: 8, Noise: s.Noise, Seed: s.Seed},
	)
	if err != nil {
		return nil, nil, fmt.Errorf("demo: rendering: %w", err)
	}
	return ref, def, nil
}

// Pair renders the default scenario and returns it with its parameters, in
// the form the service's demo hook takes.
func Pair(ctx context.Context) (ref, def *imageio.Gray, p analysis.Params, err error) {
	s := Default()
	if err := ctx.Err(); err != nil {
		return nil, nil, p, err
	}
	ref, def, err = s.Render()
	return ref, def, s.Params(), err
}

// Row is one line of the comparison with the truth.
type Row struct {
	Name string
	// Measured is Mottle's value; Truth the exact value at the point;
	// Windowed the exact displacement field seen through the same subset
	// (its mean over the subset) and the same strain window as the
	// measurement: the ideal result of these parameters (NaN where not
	// applicable).
	Measured, Truth, Windowed float64
	Note                      string
}

// Comparison is the measured result against the exact truth of the scenario.
type Comparison struct {
	Rows []Row
	// RMSU, RMSV: displacement error in px over the valid points.
	RMSU, RMSV float64
	// RMS strain error against the exact strain at each point (includes the
	// smoothing of the virtual strain gauge near the hole) and against the
	// exact displacements passed through the same strain window (the error
	// of the correlation alone).
	RMSPoint, RMSWindowed [3]float64
	Valid, Points         int
	// Ligament lists the points on the vertical line through the hole
	// centre (θ = 90°), where the Kirsch strain concentration lies.
	Ligament []LigamentPoint
}

// LigamentPoint is E11 at one point of the ligament: measured, its
// predicted std, the exact value at the point and the ideal value seen
// through the subset and the strain window.
type LigamentPoint struct {
	Y, R                           float64 // position and distance from the hole centre, px
	Measured, Std, Truth, Windowed float64
}

// Compare compares a result field of the scenario with its exact truth.
// The truth of u and v is exact at each point. For strain two truths are
// given: the exact strain at the point, and the exact displacement field
// seen through the same subset (its mean over the subset) and the same
// strain-window fit as the measurement. The first difference includes the
// smoothing of the virtual strain gauge (large near the hole, where the
// strain changes within a gauge length); the second is the error of the
// correlation alone.
func (s Scenario) Compare(ctx context.Context, f *field.Field) (Comparison, error) {
	m := s.Motion()
	n := f.Grid.Len()
	c := Comparison{Points: n}
	var q [5][]float64
	for i, name := range []string{"u", "v", "E11", "E22", "E12"} {
		v, ok := f.Get(name)
		if !ok {
			return c, fmt.Errorf("demo: the field has no %s", name)
		}
		q[i] = v
	}
	u, v, e11, e22, e12 := q[0], q[1], q[2], q[3], q[4]
	std11, ok := f.Get("std_E11")
	if !ok {
		std11 = make([]float64, n)
	}
	toPx := 1.0
	if f.Units["u"] == "mm" {
		toPx = 1 / f.Meta.MMPerPx
	}
	// The exact displacement at the grid points the measurement has, fitted
	// with the same window.
	tu, tv := make([]float64, n), make([]float64, n)
	truth := make([]synth.Truth, n)
	half := f.Grid.Subset / 2
	for k := range tu {
		truth[k] = synth.At(m, f.Grid.X[k], f.Grid.Y[k])
		tu[k], tv[k] = math.NaN(), math.NaN()
		if truth[k].Material && !math.IsNaN(u[k]) {
			tu[k], tv[k] = subsetMean(m, f.Grid.X[k], f.Grid.Y[k], half)
		}
	}
	fit, err := kinematics.ParseFit(f.Meta.StrainFit)
	if err != nil {
		return c, fmt.Errorf("demo: %w", err)
	}
	kg := kinematics.Grid{X0: f.Grid.X[0], Y0: f.Grid.Y[0], Step: float64(f.Grid.Step), Nx: f.Grid.Nx, Ny: f.Grid.Ny}
	grads, err := kinematics.Gradients(ctx, kg, tu, tv, nil, nil, kinematics.GradientOptions{Window: f.Meta.StrainWindow, Fit: fit})
	if err != nil {
		return c, fmt.Errorf("demo: windowed truth: %w", err)
	}
	var su, sv float64
	var sp, sw [3]float64
	var nu, ne int
	var mean [3][3]float64 // measured, point truth, windowed truth of E11
	peak := Row{Name: "peak E11 on the ligament", Measured: math.Inf(-1)}
	for k := range u {
		if math.IsNaN(tu[k]) {
			continue
		}
		nu++
		su += sq(u[k]*toPx - truth[k].U)
		sv += sq(v[k]*toPx - truth[k].V)
		if math.IsNaN(e11[k]) || grads[k].Status != kinematics.GradOK {
			continue
		}
		ne++
		E := kinematics.GreenLagrange(kinematics.Tensor(truth[k].F))
		W := kinematics.GreenLagrange(grads[k].F())
		got := [3]float64{e11[k], e22[k], e12[k]}
		pt := [3]float64{E[0][0], E[1][1], E[0][1]}
		wt := [3]float64{W[0][0], W[1][1], W[0][1]}
		for i := range got {
			sp[i] += sq(got[i] - pt[i])
			sw[i] += sq(got[i] - wt[i])
			mean[i][0] += got[i]
			mean[i][1] += pt[i]
			mean[i][2] += wt[i]
		}
		if math.Abs(f.Grid.X[k]-m.CX) <= float64(f.Grid.Step)/2 {
			c.Ligament = append(c.Ligament, LigamentPoint{Y: f.Grid.Y[k], R: math.Hypot(f.Grid.X[k]-m.CX, f.Grid.Y[k]-m.CY),
				Measured: e11[k], Std: std11[k], Truth: pt[0], Windowed: wt[0]})
		}
		if math.Abs(f.Grid.X[k]-m.CX) <= float64(f.Grid.Step)/2 && e11[k] > peak.Measured {
			peak.Measured, peak.Truth, peak.Windowed = e11[k], pt[0], wt[0]
			peak.Note = fmt.Sprintf("at r = %.1f px from the centre (hole edge at %.0f px)", math.Abs(f.Grid.Y[k]-m.CY), s.Radius)
		}
	}
	c.Valid = nu
	if ne == 0 {
		return c, fmt.Errorf("demo: no valid point to compare")
	}
	c.RMSU, c.RMSV = math.Sqrt(su/float64(nu)), math.Sqrt(sv/float64(nu))
	for i := range sp {
		c.RMSPoint[i] = math.Sqrt(sp[i] / float64(ne))
		c.RMSWindowed[i] = math.Sqrt(sw[i] / float64(ne))
	}
	for i, name := range []string{"mean E11", "mean E22", "mean E12"} {
		c.Rows = append(c.Rows, Row{Name: name, Measured: mean[i][0] / float64(ne), Truth: mean[i][1] / float64(ne), Windowed: mean[i][2] / float64(ne), Note: "over the valid points"})
	}
	if !math.IsInf(peak.Measured, -1) {
		c.Rows = append(c.Rows, peak)
	}
	// The Kirsch peak itself: hoop strain 3S/E at θ = 90° on the hole edge
	// (Kirsch 1898; Timoshenko & Goodier), out of reach of any subset centre.
	c.Rows = append(c.Rows, Row{Name: "Kirsch hoop strain at the edge", Measured: math.NaN(), Truth: 3 * s.Stress / s.E, Windowed: math.NaN(),
		Note: fmt.Sprintf("3S/E; no subset centre is closer than %d px to the edge", f.Grid.Subset/2)})
	return c, nil
}

func sq(x float64) float64 { return x * x }

// subsetMean returns the mean of the true displacement over the pixels of
// the square subset of half-width half centred at (X, Y): what an ideal
// first-order subset measures at its centre. The least-squares affine fit of
// a field over a symmetric subset has the field's mean as its constant term,
// so a subset smooths the displacement like a box filter of its size
// (Schreier & Sutton 2002, "Systematic errors in digital image correlation
// due to undermatched subset shape functions", Exp. Mech. 42:303; citation
// from memory, the mean property is derived here).
func subsetMean(m synth.Motion, X, Y float64, half int) (u, v float64) {
	var n float64
	for dy := -half; dy <= half; dy++ {
		for dx := -half; dx <= half; dx++ {
			t := synth.At(m, X+float64(dx), Y+float64(dy))
			if !t.Material {
				continue
			}
			u += t.U
			v += t.V
			n++
		}
	}
	return u / n, v / n
}

// Print writes the comparison as a short table.
func (c Comparison) Print(w io.Writer) {
	num := func(x float64) string {
		if math.IsNaN(x) {
			return "—"
		}
		return fmt.Sprintf("%.6f", x)
	}
	fmt.Fprintf(w, "  %-31s %10s %10s %14s\n", "Green–Lagrange strain", "measured", "truth", "ideal through")
	fmt.Fprintf(w, "  %-31s %10s %10s %14s\n", "", "", "at point", "subset+window")
	for _, r := range c.Rows {
		fmt.Fprintf(w, "  %-31s %10s %10s %14s   %s\n", r.Name, num(r.Measured), num(r.Truth), num(r.Windowed), r.Note)
	}
	fmt.Fprintf(w, "  displacement RMS error over %d valid points of %d: u %.4f px, v %.4f px\n", c.Valid, c.Points, c.RMSU, c.RMSV)
	fmt.Fprintf(w, "  strain RMS error vs truth at point:        E11 %.1e, E22 %.1e, E12 %.1e (includes the gauge's smoothing)\n", c.RMSPoint[0], c.RMSPoint[1], c.RMSPoint[2])
	fmt.Fprintf(w, "  strain RMS error vs ideal (subset+window): E11 %.1e, E22 %.1e, E12 %.1e (the correlation's own error)\n", c.RMSWindowed[0], c.RMSWindowed[1], c.RMSWindowed[2])
}

// Describe returns the scenario as a few lines of text.
func (s Scenario) Describe() string {
	var b strings.Builder
	fmt.Fprintf(&b, "  lab:      %s\n", s.Lab)
	fmt.Fprintf(&b, "  specimen: %s, hole radius %.1f mm\n", s.Specimen, s.Radius*s.MMPerPx)
	fmt.Fprintf(&b, "  material: %s\n", s.Material)
	fmt.Fprintf(&b, "  loading:  remote stress %.0f MPa along x (far-field strain σ/E = %.4f)\n", s.Stress, s.Stress/s.E)
	fmt.Fprintf(&b, "  camera:   %d×%d px, %.3f mm/px, 8-bit, noise σ = %.1f grey levels; speckles %.0f px\n", s.W, s.H, s.MMPerPx, s.Noise, s.Speckle)
	return b.String()
}

// Package results is the one results pipeline of Mottle: the field
// builder ([Build]) that turns a correlation result, or the tracked points
// of a series frame, into a [field.Field]; the map renderer ([RenderMap],
// [RenderVectors]) that draws every PNG map; and the table of result files
// ([Formats], [Outputs], [Write], [Encode]) that says which files exist and
// how each is encoded. The CLI, the service, the series engine and the
// worker all go through it, so a format, a map or a unit rule changes in
// one place.
//
// Results can feed safety decisions only with care: every value carries a
// measurement uncertainty (the std_* quantities), strains should be
// confirmed with a calibrated extensometer, and design decisions belong to
// local codes and licensed engineers.
package results

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/kinematics"
)

// Input is what the field builder needs from a correlation: the lattice of
// material points in the reference image and, per point (row-major), the
// displacement and its quality.
type Input struct {
	// Grid is the lattice of subset centres, reference-image px.
	Grid correlate.Grid
	// Subset is the subset side, px.
	Subset int
	// U, V are the displacements x − X, y − Y in image px, NaN where the
	// point has no result.
	U, V []float64
	// StdU, StdV are the predicted standard deviations of U and V in px, or
	// nil when unknown (then std_u, std_v and std_E* are left out).
	StdU, StdV []float64
	// ZNCC is the correlation coefficient per point (NaN where none).
	ZNCC []float64
	// Iterations is the IC-GN iteration count per point, or nil to leave
	// the quantity out.
	Iterations []float64
	// Status is "ok" or the reason a point has no displacement; nil means
	// "ok" where U and V are finite and "not_measured" elsewhere.
	Status []string
}

// Mapping maps image positions (px, pixel centres at integers, x right, y
// down) to coordinates of the measurement plane: undistorted pixels, or mm
// in the specimen plane (a *calib.Mapping is one). Map returns an error
// for a position it cannot map; that point then has no result. The
// mapping must be smooth: the builder differentiates it numerically.
type Mapping interface {
	Map(x, y float64) (X, Y float64, err error)
}

// StatusUnmapped is the status of a point whose reference or deformed
// position the Mapping could not map.
const StatusUnmapped = "unmapped"

// Options are the settings of the field builder.
type Options struct {
	// StrainWindow is the side of the strain window in grid points (odd).
	StrainWindow int
	// StrainFit is "plane" or "quadratic" (see kinematics.ParseFit).
	StrainFit string
	// Threads caps the goroutines of the strain fit (0 = all cores); the
	// field does not depend on it.
	Threads int
	// MMPerPx, when > 0, is the image scale: lengths (u, v, std_u, std_v)
	// are then in mm, else in px. This is the one unit rule of every
	// result.
	MMPerPx float64
	// Mapping, when not nil, maps image positions to the measurement
	// plane before differencing: u = D(X + u_px) − M(X), with M = Mapping
	// and D = DeformedMapping, and the gradients are taken with respect to
	// the plane coordinates of the reference points. MMPerPx must then be
	// 0. This is where a camera calibration enters the results. The image
	// displacements are kept as u_px and v_px (px), for maps over the
	// images.
	Mapping Mapping
	// DeformedMapping maps the deformed image's positions; nil means
	// Mapping (one camera for both images).
	DeformedMapping Mapping
	// Length is the unit of lengths under a Mapping ("mm", or "px" for an
	// undistortion that stays in pixels); "" takes the Mapping's Unit()
	// when it has that method, else "px".
	Length string
	// Params are the analysis parameters, stored in the field as JSON.
	Params any
	// Software names the program in the metadata.
	Software string
}

// Build turns a correlation result into the result field: the
// displacement gradient by the strain-window fit (kinematics.Gradients),
// every strain measure, rotation and principal values
// (kinematics.Quantities), the propagated uncertainty, the quantities u, v,
// zncc, std_u, std_v, valid, iterations (when given) and strain_points, a
// status per point, units by the one rule of Options.MMPerPx (or
// Options.Length under a Mapping), and the metadata (virtual strain gauge,
// fit, scale, cautions, float32 precision). It returns an error for
// inconsistent input or options.
func Build(ctx context.Context, in Input, opt Options) (*field.Field, error) {
	g := in.Grid
	n := g.Len()
	var errs []error
	if g.Nx < 1 || g.Ny < 1 || g.Step < 1 {
		errs = append(errs, fmt.Errorf("grid %d×%d, step %d: want at least one point and a step of 1 px or more", g.Nx, g.Ny, g.Step))
	}
	for _, a := range []struct {
		name string
		v    []float64
		opt  bool
	}{{"u", in.U, false}, {"v", in.V, false}, {"zncc", in.ZNCC, false}, {"std_u", in.StdU, true}, {"std_v", in.StdV, true}, {"iterations", in.Iterations, true}} {
		if len(a.v) != n && !(a.opt && a.v == nil) {
			errs = append(errs, fmt.Errorf("%s: %d values, want %d (grid %d×%d)", a.name, len(a.v), n, g.Nx, g.Ny))
		}
	}
	if (in.StdU == nil) != (in.StdV == nil) {
		errs = append(errs, errors.New("std_u and std_v: give both or neither"))
	}
	if in.Status != nil && len(in.Status) != n {
		errs = append(errs, fmt.Errorf("status: %d values, want %d", len(in.Status), n))
	}
	if opt.Mapping != nil && opt.MMPerPx > 0 {
		errs = append(errs, errors.New("options: give either a Mapping (with its Length unit) or MMPerPx, not both"))
	}
	if !(opt.MMPerPx >= 0) || math.IsInf(opt.MMPerPx, 0) {
		errs = append(errs, fmt.Errorf("options: mm_per_px %v: want 0 (px) or a positive scale", opt.MMPerPx))
	}
	fit, err := kinematics.ParseFit(opt.StrainFit)
	if err != nil {
		errs = append(errs, fmt.Errorf("strain_fit: %w", err))
	}
	if err := errors.Join(errs...); err != nil {
		return nil, fmt.Errorf("field builder: %w", err)
	}

	f := field.New(g.Nx, g.Ny, g.X0, g.Y0, g.Step, in.Subset)
	u, v := append([]float64(nil), in.U...), append([]float64(nil), in.V...)
	var su, sv []float64
	if in.StdU != nil {
		su, sv = append([]float64(nil), in.StdU...), append([]float64(nil), in.StdV...)
	}
	valid := make([]float64, n)
	for k := range n {
		ok := finite(u[k]) && finite(v[k])
		if in.Status != nil {
			ok = ok && in.Status[k] == "ok"
			f.Status[k] = in.Status[k]
		} else if !ok {
			f.Status[k] = "not_measured"
		}
		if !ok {
			u[k], v[k] = nan, nan
			if su != nil {
				su[k], sv[k] = nan, nan
			}
			if f.Status[k] == "ok" {
				f.Status[k] = "not_measured"
			}
			continue
		}
		valid[k] = 1
	}
	length := "px"
	var jinv [][4]float64
	if opt.Mapping != nil {
		length = opt.Length
		if un, ok := opt.Mapping.(interface{ Unit() string }); ok && length == "" {
			length = un.Unit()
		}
		if length == "" {
			length = "px"
		}
		dm := opt.DeformedMapping
		if dm == nil {
			dm = opt.Mapping
		}
		jinv = mapDisplacements(opt.Mapping, dm, g, u, v, su, sv)
		for k := range u {
			if valid[k] == 1 && !(finite(u[k]) && finite(v[k])) {
				valid[k], f.Status[k] = 0, StatusUnmapped
				if su != nil {
					su[k], sv[k] = nan, nan
				}
			}
		}
	}
	kg := kinematics.Grid{X0: float64(g.X0), Y0: float64(g.Y0), Step: float64(g.Step), Nx: g.Nx, Ny: g.Ny}
	grads, err := kinematics.Gradients(ctx, kg, u, v, su, sv, kinematics.GradientOptions{Window: opt.StrainWindow, Fit: fit, Threads: opt.Threads, Subset: float64(in.Subset)})
	if err != nil {
		return nil, fmt.Errorf("strain fit: %w", err)
	}
	if jinv != nil {
		for k := range grads {
			toPlane(&grads[k], jinv[k])
		}
	}
	qs, status := kinematics.Quantities(grads, kinematics.GreenLagrangeMeasure)
	npts := make([]float64, n)
	for k, gr := range grads {
		npts[k] = float64(gr.N)
		if f.Status[k] == "ok" {
			f.Status[k] = status[k]
		}
	}
	if opt.MMPerPx > 0 {
		length = "mm"
		for _, q := range [][]float64{u, v, su, sv} {
			for k := range q {
				q[k] *= opt.MMPerPx
			}
		}
	}
	zncc := append([]float64(nil), in.ZNCC...)
	set := func(name string, vals []float64) error { return f.Set(name, field.DefaultUnit(name, length), vals) }
	list := []struct {
		name string
		vals []float64
	}{{"u", u}, {"v", v}, {"zncc", zncc}, {"std_u", su}, {"std_v", sv}, {"valid", valid}, {"iterations", in.Iterations}, {"strain_points", npts}}
	for _, q := range list {
		if q.vals == nil {
			continue
		}
		if q.name == "iterations" {
			q.vals = append([]float64(nil), q.vals...)
		}
		if err := set(q.name, q.vals); err != nil {
			return nil, err
		}
	}
	for _, name := range kinematics.QuantityNames() {
		if err := set(name, qs[name]); err != nil {
			return nil, err
		}
	}
	if opt.Mapping != nil {
		// The image displacements, px: maps over the images and vector
		// plots place points with them (see pixelDisplacements).
		upx, vpx := make([]float64, n), make([]float64, n)
		for k := range n {
			upx[k], vpx[k] = nan, nan
			if valid[k] == 1 {
				upx[k], vpx[k] = in.U[k], in.V[k]
			}
		}
		if err := f.Set("u_px", "px", upx); err != nil {
			return nil, err
		}
		if err := f.Set("v_px", "px", vpx); err != nil {
			return nil, err
		}
	}
	if su == nil {
		for _, name := range []string{"std_E11", "std_E22", "std_E12"} {
			delete(f.Quantities, name)
			delete(f.Units, name)
		}
	}
	if opt.Params != nil {
		if f.Params, err = json.Marshal(opt.Params); err != nil {
			return nil, fmt.Errorf("parameters: %w", err)
		}
	}
	f.Meta = field.Meta{
		Software:     opt.Software,
		Created:      time.Now().UTC().Truncate(time.Second),
		VSG:          kinematics.VSG(opt.StrainWindow, float64(g.Step), float64(in.Subset)),
		StrainWindow: opt.StrainWindow,
		StrainFit:    fit.String(),
		PrincipalOf:  "green_lagrange",
		MMPerPx:      opt.MMPerPx,
		Precision:    field.Float32,
		Cautions:     field.Cautions(),
		Extra:        map[string]any{},
	}
	if opt.Mapping != nil {
		f.Meta.Extra["positions"] = "mapped to the measurement plane (" + length + ")"
	}
	return f, nil
}

// FromCorrelation returns the builder input of a correlation result: the
// displacement at each subset centre, its predicted std, ZNCC (also of
// converged points rejected by the threshold) and iteration count, and the
// correlator's status.
func FromCorrelation(res *correlate.Result, subset int) Input {
	n := res.Grid.Len()
	in := Input{Grid: res.Grid, Subset: subset,
		U: make([]float64, n), V: make([]float64, n), StdU: make([]float64, n), StdV: make([]float64, n),
		ZNCC: make([]float64, n), Iterations: make([]float64, n), Status: make([]string, n)}
	for k, pt := range res.Points {
		in.ZNCC[k], in.Iterations[k] = nan, nan
		in.Status[k] = pt.Status.String()
		if pt.Status != correlate.OK {
			in.U[k], in.V[k], in.StdU[k], in.StdV[k] = nan, nan, nan, nan
			if pt.Converged {
				in.ZNCC[k] = pt.ZNCC
			}
			continue
		}
		in.U[k], in.V[k] = pt.P[correlate.U], pt.P[correlate.V]
		in.StdU[k], in.StdV[k] = pt.StdU, pt.StdV
		in.ZNCC[k], in.Iterations[k] = pt.ZNCC, float64(pt.Iter)
	}
	return in
}

// mapDisplacements replaces the image displacements u, v (px) by those of
// the measurement plane, D(X + u) − M(X), scales their std by the local
// Jacobian of D, and returns per point the inverse Jacobian of M,
// ∂X_image/∂X_plane, row-major [a b; c d]. A point that cannot be mapped
// gets NaN displacements (and a NaN inverse Jacobian, which the strain fit
// never reads: the point is invalid).
func mapDisplacements(m, dm Mapping, g correlate.Grid, u, v, su, sv []float64) [][4]float64 {
	const h = 0.5 // px; central differences, exact for quadratic mappings
	jac := func(f Mapping, x, y float64) ([4]float64, error) {
		var p [4][2]float64
		for i, d := range [4][2]float64{{h, 0}, {-h, 0}, {0, h}, {0, -h}} {
			X, Y, err := f.Map(x+d[0], y+d[1])
			if err != nil {
				return [4]float64{}, err
			}
			p[i] = [2]float64{X, Y}
		}
		return [4]float64{(p[0][0] - p[1][0]) / (2 * h), (p[2][0] - p[3][0]) / (2 * h), (p[0][1] - p[1][1]) / (2 * h), (p[2][1] - p[3][1]) / (2 * h)}, nil
	}
	out := make([][4]float64, len(u))
	fail := func(k int) {
		u[k], v[k] = nan, nan
		out[k] = [4]float64{nan, nan, nan, nan}
	}
	for k := range u {
		X, Y := g.At(k%g.Nx, k/g.Nx)
		px, py := float64(X), float64(Y)
		j, err := jac(m, px, py)
		det := j[0]*j[3] - j[1]*j[2]
		if err != nil || !(math.Abs(det) > 0) {
			fail(k)
			continue
		}
		out[k] = [4]float64{j[3] / det, -j[1] / det, -j[2] / det, j[0] / det}
		if !finite(u[k]) || !finite(v[k]) {
			continue
		}
		rx, ry, err1 := m.Map(px, py)
		dx, dy, err2 := dm.Map(px+u[k], py+v[k])
		if err1 != nil || err2 != nil {
			fail(k)
			continue
		}
		if su != nil {
			jd, err := jac(dm, px+u[k], py+v[k])
			if err != nil {
				fail(k)
				continue
			}
			a, b := su[k], sv[k]
			su[k] = math.Hypot(jd[0]*a, jd[1]*b)
			sv[k] = math.Hypot(jd[2]*a, jd[3]*b)
		}
		u[k], v[k] = dx-rx, dy-ry
	}
	return out
}

// toPlane turns a gradient taken with respect to image coordinates into one
// with respect to plane coordinates by the chain rule, ∂u/∂X_plane =
// ∂u/∂X_image · ∂X_image/∂X_plane, and propagates the covariances.
func toPlane(gr *kinematics.Gradient, ji [4]float64) {
	if gr.Status != kinematics.GradOK {
		return
	}
	a, b, c, d := ji[0], ji[1], ji[2], ji[3]
	row := func(x, y, vx, vy, cxy float64) (nx, ny, nvx, nvy, ncxy float64) {
		nx, ny = x*a+y*c, x*b+y*d
		// Var(x·a + y·c) etc. with Cov(x, y) = cxy.
		nvx = a*a*vx + c*c*vy + 2*a*c*cxy
		nvy = b*b*vx + d*d*vy + 2*b*d*cxy
		ncxy = a*b*vx + c*d*vy + (a*d+b*c)*cxy
		return
	}
	gr.Ux, gr.Uy, gr.VarUx, gr.VarUy, gr.CovUxUy = row(gr.Ux, gr.Uy, gr.VarUx, gr.VarUy, gr.CovUxUy)
	gr.Vx, gr.Vy, gr.VarVx, gr.VarVy, gr.CovVxVy = row(gr.Vx, gr.Vy, gr.VarVx, gr.VarVy, gr.CovVxVy)
}

var nan = math.NaN()

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

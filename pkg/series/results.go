package series

import (
	"context"
	"math"
	"sort"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/kinematics"
	"github.com/mottledic/mottle/pkg/results"
)

// pos returns the reference position of grid point k.
func (l lattice) pos(k int) (x, y float64) {
	return l.X0 + float64(k%l.Nx)*l.Step, l.Y0 + float64(k/l.Nx)*l.Step
}

func (l lattice) kin() kinematics.Grid {
	return kinematics.Grid{X0: l.X0, Y0: l.Y0, Step: l.Step, Nx: l.Nx, Ny: l.Ny}
}

// results turns the tracked points of one frame into its field (with the
// one field builder, results.Build), summary and history snapshot. It
// does not change the tracker.
func (t *Tracker) results(ctx context.Context, pts []PointState, meta FrameMeta, index int, mode string) (*Frame, Snapshot, error) {
	p := t.st.Params
	g := t.st.Grid
	n := len(pts)
	nan := math.NaN()
	in := results.Input{Grid: g.grid(), Subset: p.Analysis.Subset,
		U: make([]float64, n), V: make([]float64, n), StdU: make([]float64, n), StdV: make([]float64, n),
		ZNCC: make([]float64, n), Status: make([]string, n)}
	valid := make([]bool, n)
	hasStd := true
	for k, q := range pts {
		X, Y := g.pos(k)
		if q.Valid {
			in.U[k], in.V[k], valid[k] = q.X-X, q.Y-Y, true
			in.StdU[k], in.StdV[k] = q.StdU, q.StdV
			in.ZNCC[k], in.Status[k] = q.ZNCC, "ok"
			if !(q.StdU > 0 && q.StdV > 0) {
				hasStd = false
			}
			continue
		}
		in.U[k], in.V[k], in.StdU[k], in.StdV[k], in.ZNCC[k] = nan, nan, nan, nan, nan
		in.Status[k] = q.Reason
		if in.Status[k] == "" || in.Status[k] == "ok" {
			in.Status[k] = "not_tracked"
		}
	}
	if !hasStd {
		in.StdU, in.StdV = nil, nil
	}
	f, err := results.Build(ctx, in, p.buildOptions())
	if err != nil {
		return nil, Snapshot{}, err
	}
	analysis.SetCalibrationMeta(f, p.Analysis)
	q, status := f.Quantities, f.Status
	scale := p.outScale()
	var mapping positionMap
	if m := p.Analysis.Mapping(); m != nil {
		mapping = m
	}

	snap := Snapshot{Time: timeOr(meta.Time), HasTime: meta.Time != nil,
		U: in.U, V: in.V, E11: q["E11"], E22: q["E22"], E12: q["E12"]}
	if mapping != nil {
		// Under a calibration the field's u, v are already mapped (mm in
		// the specimen plane, or undistorted px); rates take them as they are.
		snap.U, snap.V, scale = q["u"], q["v"], 1
	}
	rates := map[string][]float64{}
	t.rates(rates, snap, scale)
	length := p.outUnit()
	for _, name := range sortedNames(rates) {
		if err := f.Set(name, unitOf(name, length), rates[name]); err != nil {
			return nil, Snapshot{}, err
		}
	}

	s := Summary{Index: index, Name: meta.Name, Time: meta.Time, Load: meta.Load, Stress: t.stress(meta.Load),
		Mode: mode, Static: index <= p.StaticFrames, Mean: map[string]float64{}}
	nv := 0
	for k := range pts {
		if valid[k] {
			nv++
			s.MeanZNCC += pts[k].ZNCC
		}
	}
	s.ValidFraction = float64(nv) / float64(n)
	if nv > 0 {
		s.MeanZNCC /= float64(nv)
	}
	ok := make([]bool, n)
	for _, name := range MeanNames {
		for k := range ok {
			ok[k] = valid[k] && status[k] == "ok"
		}
		s.Mean[name], _, _, _, _ = Stats(q[name], ok)
	}
	ls := 1 / p.lengthScale() // coordinate units → px
	for _, e := range p.Extensometers {
		epx := Extensometer{Name: e.Name, A: [2]float64{e.A[0] * ls, e.A[1] * ls}, B: [2]float64{e.B[0] * ls, e.B[1] * ls}}
		s.Extensometers = append(s.Extensometers, g.readExtensometer(epx, in.U, in.V, in.StdU, in.StdV, float64(p.Analysis.Subset), valid, scale, mapping))
	}
	for _, gg := range p.Gauges {
		gpx := gg.scaled(ls)
		inside := make([]bool, n)
		for k := range inside {
			X, Y := g.pos(k)
			inside[k] = valid[k] && status[k] == "ok" && gpx.Contains(X, Y)
		}
		for _, c := range gg.components() {
			r := GaugeReading{Gauge: gg.Name, Component: c}
			r.Mean, r.Std, r.Min, r.Max, r.N = Stats(q[c], inside)
			s.Gauges = append(s.Gauges, r)
		}
	}
	t.curveRates(&s)
	return &Frame{Summary: s, Grid: g.kin(), Quantities: q, Status: status, Field: f}, snap, nil
}

// grid returns the lattice as a correlation grid (whole pixels, as every
// lattice of a Tracker is).
func (l lattice) grid() correlate.Grid {
	return correlate.Grid{X0: int(l.X0), Y0: int(l.Y0), Step: int(l.Step), Nx: l.Nx, Ny: l.Ny}
}

func sortedNames(m map[string][]float64) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}

// deriv returns the first and second derivative at t2 of the quadratic
// through (t0, f0), (t1, f1), (t2, f2) (Lagrange interpolation; exact for
// polynomials up to degree 2, see e.g. Fornberg 1988, "Generation of finite
// difference formulas on arbitrarily spaced grids", Math. Comp. 51:699).
func deriv(t0, t1, t2, f0, f1, f2 float64) (d1, d2 float64) {
	a := (t0 - t1) * (t0 - t2)
	b := (t1 - t0) * (t1 - t2)
	c := (t2 - t0) * (t2 - t1)
	d1 = f0*(t2-t1)/a + f1*(t2-t0)/b + f2*(2*t2-t0-t1)/c
	d2 = 2 * (f0/a + f1/b + f2/c)
	return d1, d2
}

// timeDerivs returns the velocity and acceleration of a value known at the
// given times (oldest first, up to three, the last one current): a
// backward difference with two samples (no acceleration), the quadratic
// formula with three.
func timeDerivs(ts, fs []float64) (d1, d2 float64, ok1, ok2 bool) {
	switch len(ts) {
	case 2:
		return (fs[1] - fs[0]) / (ts[1] - ts[0]), 0, true, false
	case 3:
		d1, d2 = deriv(ts[0], ts[1], ts[2], fs[0], fs[1], fs[2])
		return d1, d2, true, true
	}
	return 0, 0, false, false
}

// rates adds the Lagrangian velocity and acceleration of u, v (at fixed X)
// and the strain rates to q, when the recent frames all carry times.
func (t *Tracker) rates(q map[string][]float64, cur Snapshot, scale float64) {
	hist := append(append([]Snapshot(nil), t.st.History...), cur)
	if len(hist) > 3 {
		hist = hist[len(hist)-3:]
	}
	for len(hist) > 1 && !hist[0].HasTime {
		hist = hist[1:]
	}
	if len(hist) < 2 || !cur.HasTime {
		return
	}
	for _, h := range hist {
		if !h.HasTime {
			return
		}
	}
	ts := make([]float64, len(hist))
	for i, h := range hist {
		ts[i] = h.Time
	}
	n := len(cur.U)
	nan := math.NaN()
	fs := make([]float64, len(hist))
	series := []struct {
		name  string
		get   func(Snapshot) []float64
		scale float64
	}{
		{"u", func(s Snapshot) []float64 { return s.U }, scale},
		{"v", func(s Snapshot) []float64 { return s.V }, scale},
		{"E11", func(s Snapshot) []float64 { return s.E11 }, 1},
		{"E22", func(s Snapshot) []float64 { return s.E22 }, 1},
		{"E12", func(s Snapshot) []float64 { return s.E12 }, 1},
	}
	for _, sr := range series {
		vel := make([]float64, n)
		var acc []float64
		if len(hist) == 3 && (sr.name == "u" || sr.name == "v") {
			acc = make([]float64, n)
		}
		for k := range n {
			for i, h := range hist {
				fs[i] = sr.get(h)[k] * sr.scale
			}
			d1, d2, _, _ := timeDerivs(ts, fs)
			vel[k] = d1 // NaN propagates from invalid points
			if acc != nil {
				acc[k] = d2
			}
			if math.IsInf(d1, 0) {
				vel[k] = nan
			}
		}
		if sr.name == "u" || sr.name == "v" {
			q["vel_"+sr.name] = vel
			if acc != nil {
				q["acc_"+sr.name] = acc
			}
		} else {
			q["rate_"+sr.name] = vel
		}
	}
}

// curveRates fills the extensometer and gauge rates of s from the last
// rows of the curve.
func (t *Tracker) curveRates(s *Summary) {
	rows := append(append([]Summary(nil), t.st.Curve...), *s)
	if len(rows) > 3 {
		rows = rows[len(rows)-3:]
	}
	for len(rows) > 1 && rows[0].Time == nil {
		rows = rows[1:]
	}
	if len(rows) < 2 {
		return
	}
	ts := make([]float64, len(rows))
	for i, r := range rows {
		if r.Time == nil {
			return
		}
		ts[i] = *r.Time
	}
	fs := make([]float64, len(rows))
	for e := range s.Extensometers {
		ok := true
		for i, r := range rows {
			if e >= len(r.Extensometers) || !r.Extensometers[e].Valid {
				ok = false
				break
			}
			fs[i] = r.Extensometers[e].True
		}
		if ok {
			d, _, _, _ := timeDerivs(ts, fs)
			s.Extensometers[e].Rate = &d
		}
	}
	for gi := range s.Gauges {
		ok := true
		for i, r := range rows {
			if gi >= len(r.Gauges) || r.Gauges[gi].N == 0 && r.Mode != ModeReference {
				ok = false
				break
			}
			fs[i] = r.Gauges[gi].Mean
		}
		if ok {
			d, _, _, _ := timeDerivs(ts, fs)
			s.Gauges[gi].Rate = &d
		}
	}
}

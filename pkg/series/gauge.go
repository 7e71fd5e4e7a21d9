package series

import (
	"fmt"
	"math"
	"sort"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/kinematics"
)

// Extensometer is a virtual extensometer: two material points A and B
// given in reference-image coordinates (px, or mm when Params.Units is
// "mm"). Its reading is the stretch l/L of the segment between them.
type Extensometer struct {
	Name string     `json:"name"`
	A    [2]float64 `json:"a"`
	B    [2]float64 `json:"b"`
}

// Gauge is a virtual strain gauge: a region of the reference image (a
// rectangle or a polygon, px or mm as Params.Units) over which the mean,
// standard deviation, minimum and maximum of strain components are taken.
type Gauge struct {
	Name string `json:"name"`
	// Rect is x0, y0, x1, y1 (x0 < x1, y0 < y1). Ignored if Polygon is set.
	Rect *[4]float64 `json:"rect,omitempty"`
	// Polygon lists the vertices (x, y) in order, at least three.
	Polygon [][2]float64 `json:"polygon,omitempty"`
	// Components are the quantity names to average (see the shared names:
	// E11, E22, E12, eps11, H11, …); default E11, E22, E12.
	Components []string `json:"components,omitempty"`
}

// ExtReading is one extensometer's reading in one frame.
type ExtReading struct {
	Name string `json:"name"`
	// L0 and L are the reference and current lengths, in the series' units.
	L0 float64 `json:"L0"`
	L  float64 `json:"L"`
	// Stretch is l/L; Eng the engineering strain l/L − 1; True the true
	// (logarithmic) strain ln(l/L).
	Stretch float64 `json:"stretch"`
	Eng     float64 `json:"eng_strain"`
	True    float64 `json:"true_strain"`
	// Rate is d(True)/dt in 1/s, when the frames carry time stamps.
	Rate *float64 `json:"true_strain_rate,omitempty"`
	// EngStd is the predicted standard deviation of Eng from the
	// displacement std at the two ends (see extStd), when the points carry
	// one.
	EngStd *float64 `json:"eng_strain_std,omitempty"`
	// Valid is false when an end point could not be located (no valid
	// measurement points around it); the strains are then 0.
	Valid bool `json:"valid"`
}

// GaugeReading is one component of one gauge in one frame.
type GaugeReading struct {
	Gauge     string  `json:"gauge"`
	Component string  `json:"component"`
	Mean      float64 `json:"mean"`
	Std       float64 `json:"std"`
	Min       float64 `json:"min"`
	Max       float64 `json:"max"`
	// N is the number of valid measurement points inside the gauge.
	N int `json:"n"`
	// Rate is d(Mean)/dt in 1/s, when the frames carry time stamps.
	Rate *float64 `json:"rate,omitempty"`
}

// validateGeometry checks extensometers and gauges, returning every
// problem with the field it is about (extensometers[i], gauges[i]).
func validateGeometry(ext []Extensometer, gs []Gauge) []analysis.Problem {
	var ps []analysis.Problem
	add := func(field, format string, a ...any) {
		ps = append(ps, analysis.Problem{Field: field, Message: fmt.Sprintf(format, a...)})
	}
	names := map[string]bool{}
	for i, e := range ext {
		f := fmt.Sprintf("extensometers[%d]", i)
		if e.Name == "" {
			add(f, "name is empty")
		} else if names["ext:"+e.Name] {
			add(f, "name %q used twice", e.Name)
		}
		names["ext:"+e.Name] = true
		if !finite(e.A[0], e.A[1], e.B[0], e.B[1]) {
			add(f, "extensometer %q: end points must be finite", e.Name)
		} else if e.A == e.B {
			add(f, "extensometer %q: end points A and B coincide; give two distinct points", e.Name)
		}
	}
	for i, g := range gs {
		f := fmt.Sprintf("gauges[%d]", i)
		if g.Name == "" {
			add(f, "name is empty")
		} else if names["gauge:"+g.Name] {
			add(f, "name %q used twice", g.Name)
		}
		names["gauge:"+g.Name] = true
		switch {
		case len(g.Polygon) > 0:
			if len(g.Polygon) < 3 {
				add(f, "gauge %q: polygon has %d vertices, need at least 3", g.Name, len(g.Polygon))
			}
			for _, p := range g.Polygon {
				if !finite(p[0], p[1]) {
					add(f, "gauge %q: polygon vertex %v is not finite", g.Name, p)
					break
				}
			}
		case g.Rect != nil:
			r := g.Rect
			if !finite(r[0], r[1], r[2], r[3]) || !(r[2] > r[0] && r[3] > r[1]) {
				add(f, "gauge %q: rect %v must be x0, y0, x1, y1 with x0 < x1 and y0 < y1", g.Name, *r)
			}
		default:
			add(f, "gauge %q: give a rect or a polygon", g.Name)
		}
		for _, c := range g.Components {
			if !gaugeComponents[c] {
				add(f, "gauge %q: component %q unknown; use one of %v", g.Name, c, sortedKeys(gaugeComponents))
			}
		}
	}
	return ps
}

// gaugeComponents are the quantities a gauge can average.
var gaugeComponents = map[string]bool{
	"u": true, "v": true,
	"F11": true, "F12": true, "F21": true, "F22": true,
	"E11": true, "E22": true, "E12": true,
	"H11": true, "H22": true, "H12": true,
	"A11": true, "A22": true, "A12": true,
	"eps11": true, "eps22": true, "eps12": true,
	"rotation_deg": true, "E_max": true, "E_min": true, "von_mises": true, "detF": true,
}

func sortedKeys(m map[string]bool) []string {
	k := make([]string, 0, len(m))
	for s := range m {
		k = append(k, s)
	}
	sort.Strings(k)
	return k
}

func finite(v ...float64) bool {
	for _, x := range v {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return false
		}
	}
	return true
}

// components returns the gauge's components or the default set.
func (g Gauge) components() []string {
	if len(g.Components) == 0 {
		return []string{"E11", "E22", "E12"}
	}
	return g.Components
}

// scaled returns the gauge with its geometry multiplied by s (mm → px).
func (g Gauge) scaled(s float64) Gauge {
	out := g
	if g.Rect != nil {
		r := *g.Rect
		for i := range r {
			r[i] *= s
		}
		out.Rect = &r
	}
	if g.Polygon != nil {
		out.Polygon = make([][2]float64, len(g.Polygon))
		for i, p := range g.Polygon {
			out.Polygon[i] = [2]float64{p[0] * s, p[1] * s}
		}
	}
	return out
}

// Contains reports whether reference point (x, y), in the gauge's own
// units, lies inside the gauge. Points on the boundary of a rectangle are
// inside; for polygons the even–odd rule is used (common practice).
func (g Gauge) Contains(x, y float64) bool {
	if len(g.Polygon) > 0 {
		return inPolygon(g.Polygon, x, y)
	}
	if g.Rect != nil {
		r := g.Rect
		return x >= r[0] && x <= r[2] && y >= r[1] && y <= r[3]
	}
	return false
}

func inPolygon(poly [][2]float64, x, y float64) bool {
	in := false
	for i, j := 0, len(poly)-1; i < len(poly); j, i = i, i+1 {
		xi, yi, xj, yj := poly[i][0], poly[i][1], poly[j][0], poly[j][1]
		if (yi > y) != (yj > y) && x < (xj-xi)*(y-yi)/(yj-yi)+xi {
			in = !in
		}
	}
	return in
}

// Stats returns the mean, population standard deviation, min and max of
// the values whose ok flag is set, and how many there were.
func Stats(vals []float64, ok []bool) (mean, std, min, max float64, n int) {
	min, max = math.Inf(1), math.Inf(-1)
	for i, v := range vals {
		if !ok[i] || math.IsNaN(v) {
			continue
		}
		n++
		mean += v
		min = math.Min(min, v)
		max = math.Max(max, v)
	}
	if n == 0 {
		return 0, 0, 0, 0, 0
	}
	mean /= float64(n)
	for i, v := range vals {
		if ok[i] && !math.IsNaN(v) {
			std += (v - mean) * (v - mean)
		}
	}
	return mean, math.Sqrt(std / float64(n)), min, max, n
}

// lattice is the regular grid of material points, in reference pixels.
type lattice struct {
	X0, Y0, Step float64
	Nx, Ny       int
}

// displacementAt returns the displacement at reference point (x, y), px,
// interpolated from the valid grid values u, v: bilinear when the four
// surrounding points are valid, otherwise a least-squares plane through
// the valid points of the surrounding 4×4 block (both exact for a uniform
// deformation gradient). ok is false when fewer than three non-collinear
// valid points are near.
func (l lattice) displacementAt(u, v []float64, valid []bool, x, y float64) (du, dv float64, ok bool) {
	fx := (x - l.X0) / l.Step
	fy := (y - l.Y0) / l.Step
	if !(fx >= -0.5 && fy >= -0.5 && fx <= float64(l.Nx)-0.5 && fy <= float64(l.Ny)-0.5) {
		return 0, 0, false
	}
	i0 := int(math.Floor(fx))
	j0 := int(math.Floor(fy))
	at := func(i, j int) (int, bool) {
		if i < 0 || j < 0 || i >= l.Nx || j >= l.Ny {
			return 0, false
		}
		k := j*l.Nx + i
		return k, valid[k]
	}
	k00, a := at(i0, j0)
	k10, b := at(i0+1, j0)
	k01, c := at(i0, j0+1)
	k11, d := at(i0+1, j0+1)
	if a && b && c && d {
		tx, ty := fx-float64(i0), fy-float64(j0)
		w00, w10, w01, w11 := (1-tx)*(1-ty), tx*(1-ty), (1-tx)*ty, tx*ty
		return w00*u[k00] + w10*u[k10] + w01*u[k01] + w11*u[k11],
			w00*v[k00] + w10*v[k10] + w01*v[k01] + w11*v[k11], true
	}
	// Plane fit in local coordinates (grid units about (fx, fy)).
	var s [3][3]float64
	var bu, bv [3]float64
	n := 0
	for j := j0 - 1; j <= j0+2; j++ {
		for i := i0 - 1; i <= i0+2; i++ {
			k, ok := at(i, j)
			if !ok {
				continue
			}
			p := [3]float64{1, float64(i) - fx, float64(j) - fy}
			for r := range 3 {
				for q := range 3 {
					s[r][q] += p[r] * p[q]
				}
				bu[r] += p[r] * u[k]
				bv[r] += p[r] * v[k]
			}
			n++
		}
	}
	if n < 3 {
		return 0, 0, false
	}
	su, ok1 := solve3(s, bu)
	sv, ok2 := solve3(s, bv)
	if !ok1 || !ok2 {
		return 0, 0, false
	}
	return su[0], sv[0], true
}

// stdAt returns the displacement std at (x, y) px. Where displacementAt
// interpolates bilinearly between the four grid points around the
// position, it is the std of that weighted sum, with the errors of two
// points correlated as the share of pixels their subsets (of side subset
// px) have in common (kinematics.SubsetCorrelation, from the linearised
// estimator of Wang, Li, Tong & Ruan 2007, Exp. Mech. 47:701).
// Elsewhere it is the mean std of the valid points of the 4×4 block
// around the position, which the plane fit there uses (an upper bound).
// ok is false where no point there has a positive std.
func (l lattice) stdAt(su, sv []float64, valid []bool, x, y, subset float64) (sx, sy float64, ok bool) {
	fx, fy := (x-l.X0)/l.Step, (y-l.Y0)/l.Step
	i0, j0 := int(math.Floor(fx)), int(math.Floor(fy))
	idx := func(i, j int) (int, bool) {
		if i < 0 || j < 0 || i >= l.Nx || j >= l.Ny {
			return 0, false
		}
		k := j*l.Nx + i
		return k, valid[k] && su[k] > 0 && sv[k] > 0
	}
	var ks [4]int
	var w [4]float64
	all := true
	tx, ty := fx-float64(i0), fy-float64(j0)
	for c := range 4 {
		di, dj := c%2, c/2
		k, good := idx(i0+di, j0+dj)
		all = all && good
		ks[c] = k
		w[c] = (float64(1-di) + float64(2*di-1)*tx) * (float64(1-dj) + float64(2*dj-1)*ty)
	}
	if all {
		var vx, vy float64
		for a := range 4 {
			for b := range 4 {
				r := kinematics.SubsetCorrelation(a%2-b%2, l.Step, subset) * kinematics.SubsetCorrelation(a/2-b/2, l.Step, subset)
				vx += w[a] * w[b] * r * su[ks[a]] * su[ks[b]]
				vy += w[a] * w[b] * r * sv[ks[a]] * sv[ks[b]]
			}
		}
		return math.Sqrt(vx), math.Sqrt(vy), true
	}
	n := 0
	for j := j0 - 1; j <= j0+2; j++ {
		for i := i0 - 1; i <= i0+2; i++ {
			if k, good := idx(i, j); good {
				sx, sy, n = sx+su[k], sy+sv[k], n+1
			}
		}
	}
	if n == 0 {
		return 0, 0, false
	}
	return sx / float64(n), sy / float64(n), true
}

// extStd returns the predicted std of an extensometer's engineering
// strain from the displacement std (sx, sy) at each end, px, and the
// reference length L0 px along the unit direction (nx, ny): only the
// components along the extensometer change its length to first order,
// and the ends' errors are taken as independent (ends further apart than
// a subset share no pixels), so σ_ε² = Σ_ends (nx²σx² + ny²σy²) / L0²
// (first-order propagation, JCGM 100:2008, 5.1).
func extStd(a, b [2]float64, nx, ny, L0 float64) float64 {
	return math.Sqrt(nx*nx*(a[0]*a[0]+b[0]*b[0])+ny*ny*(a[1]*a[1]+b[1]*b[1])) / L0
}

// solve3 solves the 3×3 system a·x = b by Cramer's rule; ok is false when
// a is (nearly) singular.
func solve3(a [3][3]float64, b [3]float64) ([3]float64, bool) {
	det := func(m [3][3]float64) float64 {
		return m[0][0]*(m[1][1]*m[2][2]-m[1][2]*m[2][1]) -
			m[0][1]*(m[1][0]*m[2][2]-m[1][2]*m[2][0]) +
			m[0][2]*(m[1][0]*m[2][1]-m[1][1]*m[2][0])
	}
	d := det(a)
	scale := a[0][0] * a[1][1] * a[2][2]
	if scale == 0 || math.Abs(d) < 1e-9*math.Abs(scale) {
		return [3]float64{}, false
	}
	var x [3]float64
	for c := range 3 {
		m := a
		for r := range 3 {
			m[r][c] = b[r]
		}
		x[c] = det(m) / d
	}
	return x, true
}

// positionMap maps image positions to the measurement plane (a
// *calib.Mapping); nil means none.
type positionMap interface {
	Map(x, y float64) (X, Y float64, err error)
}

// readExtensometer evaluates e (already in px) on the grid displacement
// values; scale converts px to the output units (1 for px, mm/px for mm).
// With a position map m, the lengths are those between the mapped end
// points (and scale is not used).
func (l lattice) readExtensometer(e Extensometer, u, v, su, sv []float64, subset float64, valid []bool, scale float64, m positionMap) ExtReading {
	r := ExtReading{Name: e.Name}
	L0 := math.Hypot(e.B[0]-e.A[0], e.B[1]-e.A[1])
	r.L0 = L0 * scale
	ua, va, ok1 := l.displacementAt(u, v, valid, e.A[0], e.A[1])
	ub, vb, ok2 := l.displacementAt(u, v, valid, e.B[0], e.B[1])
	if !ok1 || !ok2 {
		return r
	}
	if su != nil && sv != nil {
		ax, ay, okA := l.stdAt(su, sv, valid, e.A[0], e.A[1], subset)
		bx, by, okB := l.stdAt(su, sv, valid, e.B[0], e.B[1], subset)
		if okA && okB {
			s := extStd([2]float64{ax, ay}, [2]float64{bx, by}, (e.B[0]-e.A[0])/L0, (e.B[1]-e.A[1])/L0, L0)
			r.EngStd = &s
		}
	}
	L := math.Hypot(e.B[0]+ub-e.A[0]-ua, e.B[1]+vb-e.A[1]-va)
	if m != nil {
		// Under a calibration both lengths are measured between the mapped
		// end points (undistorted, or mm in the specimen plane).
		var p [4][2]float64
		for i, q := range [4][2]float64{{e.A[0], e.A[1]}, {e.B[0], e.B[1]}, {e.A[0] + ua, e.A[1] + va}, {e.B[0] + ub, e.B[1] + vb}} {
			x, y, err := m.Map(q[0], q[1])
			if err != nil {
				return r
			}
			p[i] = [2]float64{x, y}
		}
		L0 = math.Hypot(p[1][0]-p[0][0], p[1][1]-p[0][1])
		L = math.Hypot(p[3][0]-p[2][0], p[3][1]-p[2][1])
		r.L0, scale = L0, 1
	}
	r.L = L * scale
	r.Stretch = L / L0
	r.Eng = r.Stretch - 1
	r.True = math.Log(r.Stretch)
	r.Valid = true
	return r
}

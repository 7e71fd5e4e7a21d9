package synth

import (
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"
)

// Spec names a motion and its parameters, for truth files and the CLI.
type Spec struct {
	Kind   string             `json:"kind"`
	Params map[string]float64 `json:"params"`
}

// String returns the spec in the form ParseMotion reads:
// "kind:name=value,name=value" with the names sorted.
func (s Spec) String() string {
	names := make([]string, 0, len(s.Params))
	for n := range s.Params {
		names = append(names, n)
	}
	sort.Strings(names)
	var b strings.Builder
	b.WriteString(s.Kind)
	for i, n := range names {
		if i == 0 {
			b.WriteByte(':')
		} else {
			b.WriteByte(',')
		}
		b.WriteString(n + "=" + strconv.FormatFloat(s.Params[n], 'g', -1, 64))
	}
	return b.String()
}

// Param describes one parameter of a motion kind.
type Param struct {
	Name string
	// Default is used when the parameter is not given. When ImageRel is
	// set, the default is this fraction of the image width (x-like names)
	// or height (y-like names).
	Default  float64
	ImageRel bool
	Doc      string
}

// KindInfo describes a motion kind for help texts and parsing.
type KindInfo struct {
	Kind   string
	Doc    string
	Params []Param
}

// Kinds returns the motion kinds NewMotion and ParseMotion accept, with
// their parameters and defaults.
func Kinds() []KindInfo {
	centre := []Param{
		{"cx", 0.5, true, "centre x, px (default: image centre)"},
		{"cy", 0.5, true, "centre y, px (default: image centre)"},
	}
	quad := []Param{}
	for _, n := range quadNames {
		quad = append(quad, Param{n, 0, false, "coefficient " + n})
	}
	return []KindInfo{
		{"identity", "no motion", nil},
		{"translation", "rigid translation", []Param{
			{"u", 0, false, "x displacement, px"}, {"v", 0, false, "y displacement, px"}}},
		{"rotation", "rigid rotation about a centre (+ turns +x toward +y, clockwise on screen), then translation",
			append([]Param{{"angle_deg", 0, false, "rotation angle, degrees"}}, append(centre,
				Param{"u", 0, false, "x translation, px"}, Param{"v", 0, false, "y translation, px"})...)},
		{"affine", "homogeneous F (det F > 0) about a centre, then translation: x = c + F(X − c) + (u, v)",
			append([]Param{{"F11", 1, false, "∂x/∂X"}, {"F12", 0, false, "∂x/∂Y"}, {"F21", 0, false, "∂y/∂X"}, {"F22", 1, false, "∂y/∂Y"}},
				append(centre, Param{"u", 0, false, "x translation, px"}, Param{"v", 0, false, "y translation, px"})...)},
		{"quadratic", "second-order displacement about a centre: u = u + ux·dX + uy·dY + ½uxx·dX² + uxy·dX·dY + ½uyy·dY², same for v",
			append(quad, centre...)},
		{"star", "DIC Challenge 2.0 star (from memory): v = A·cos(2π(Y − y0)/p(X)), period growing along x", []Param{
			{"amplitude", 0.5, false, "amplitude A, px"},
			{"period_min", 10, false, "period at x ≤ x0, px"},
			{"period_max", 300, false, "period at x ≥ x1, px"},
			{"x0", 0, true, "x where the period starts to grow, px (default 0)"},
			{"x1", 1, true, "x where it reaches period_max, px (default: image width)"},
			{"y0", 0.5, true, "y of the crest line, px (default: image centre)"},
			{"geometric", 0, false, "1 = period grows geometrically, 0 = linearly"}}},
		{"hole", "plate with a circular hole under remote uniaxial x tension, plane stress (Kirsch)", append([]Param{
			{"E_MPa", 70000, false, "Young's modulus, MPa"},
			{"nu", 0.33, false, "Poisson's ratio"},
			{"radius_px", 0.1, true, "hole radius, px (default: 10 % of the image width)"},
			{"stress_MPa", 350, false, "remote stress along x, MPa"},
			{"mm_per_px", 0.01, false, "image scale, mm/px"}}, centre...)},
	}
}

// kindInfo returns the KindInfo of kind.
func kindInfo(kind string) (KindInfo, bool) {
	for _, k := range Kinds() {
		if k.Kind == kind {
			return k, true
		}
	}
	return KindInfo{}, false
}

func kindNames() string {
	var n []string
	for _, k := range Kinds() {
		n = append(n, k.Kind)
	}
	return strings.Join(n, ", ")
}

// NewMotion builds the motion described by s. Missing parameters take
// their defaults; image-relative defaults use a w×h image (pass the image
// size, or 0, 0 to require those parameters). Unknown parameter names are
// an error.
func NewMotion(s Spec, w, h int) (Motion, error) {
	info, ok := kindInfo(s.Kind)
	if !ok {
		return nil, fmt.Errorf("%w: unknown motion kind %q; use one of %s", ErrMotion, s.Kind, kindNames())
	}
	p := map[string]float64{}
	for _, d := range info.Params {
		if v, ok := s.Params[d.Name]; ok {
			p[d.Name] = v
			continue
		}
		if d.ImageRel {
			size := float64(w)
			if strings.HasPrefix(d.Name, "y") || d.Name == "cy" {
				size = float64(h)
			}
			if size <= 0 {
				return nil, fmt.Errorf("%w: %s needs parameter %s (%s)", ErrMotion, s.Kind, d.Name, d.Doc)
			}
			// Image-relative positions refer to pixel centres: 0.5 → (size−1)/2.
			p[d.Name] = d.Default * (size - 1)
			continue
		}
		p[d.Name] = d.Default
	}
	for n, v := range s.Params {
		known := false
		for _, d := range info.Params {
			known = known || d.Name == n
		}
		if !known {
			var names []string
			for _, d := range info.Params {
				names = append(names, d.Name)
			}
			return nil, fmt.Errorf("%w: %s has no parameter %q; it takes %s", ErrMotion, s.Kind, n, strings.Join(names, ", "))
		}
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, fmt.Errorf("%w: %s parameter %s = %g is not finite", ErrMotion, s.Kind, n, v)
		}
	}
	switch s.Kind {
	case "identity":
		return Identity{}, nil
	case "translation":
		return Translation{p["u"], p["v"]}, nil
	case "rotation":
		return Rotation{Angle: p["angle_deg"], CX: p["cx"], CY: p["cy"], U: p["u"], V: p["v"]}, nil
	case "affine":
		a := Affine{F: [2][2]float64{{p["F11"], p["F12"]}, {p["F21"], p["F22"]}}, CX: p["cx"], CY: p["cy"], U: p["u"], V: p["v"]}
		return a, a.Validate()
	case "quadratic":
		q := Quadratic{CX: p["cx"], CY: p["cy"]}
		for i, n := range quadNames {
			q.P[i] = p[n]
		}
		return q, nil
	case "star":
		st := Star{Amplitude: p["amplitude"], PeriodMin: p["period_min"], PeriodMax: p["period_max"],
			X0: p["x0"], X1: p["x1"], Y0: p["y0"], Geometric: p["geometric"] != 0}
		return st, st.Validate()
	case "hole":
		ho := Hole{E: p["E_MPa"], Nu: p["nu"], Radius: p["radius_px"], Stress: p["stress_MPa"],
			MMPerPx: p["mm_per_px"], CX: p["cx"], CY: p["cy"]}
		return ho, ho.Validate()
	}
	return nil, fmt.Errorf("%w: unknown motion kind %q", ErrMotion, s.Kind)
}

// ParseSpec parses "kind" or "kind:name=value,name=value".
func ParseSpec(text string) (Spec, error) {
	kind, rest, _ := strings.Cut(strings.TrimSpace(text), ":")
	s := Spec{Kind: strings.TrimSpace(kind), Params: map[string]float64{}}
	if rest == "" {
		return s, nil
	}
	for _, kv := range strings.Split(rest, ",") {
		n, v, ok := strings.Cut(kv, "=")
		n = strings.TrimSpace(n)
		if !ok || n == "" {
			return s, fmt.Errorf("%w: motion %q: %q is not name=value", ErrMotion, text, kv)
		}
		f, err := strconv.ParseFloat(strings.TrimSpace(v), 64)
		if err != nil {
			return s, fmt.Errorf("%w: motion %q: parameter %s: %q is not a number", ErrMotion, text, n, v)
		}
		if _, dup := s.Params[n]; dup {
			return s, fmt.Errorf("%w: motion %q: parameter %s given twice", ErrMotion, text, n)
		}
		s.Params[n] = f
	}
	return s, nil
}

// ParseMotion parses a motion written as "kind:name=value,…" (see Kinds)
// and builds it for a w×h image, e.g. "affine:F11=1.02,F22=0.99" or
// "hole:stress_MPa=200,radius_px=40".
func ParseMotion(text string, w, h int) (Motion, error) {
	s, err := ParseSpec(text)
	if err != nil {
		return nil, err
	}
	return NewMotion(s, w, h)
}

// Scale returns m scaled by the load factor s, or an error if m does not
// implement Scaler.
func Scale(m Motion, s float64) (Motion, error) {
	if sc, ok := m.(Scaler); ok {
		return sc.Scale(s), nil
	}
	return nil, fmt.Errorf("%w: motion %q cannot be scaled by a load factor", ErrMotion, m.Spec().Kind)
}

// Truth is the exact motion at one reference point.
type Truth struct {
	X, Y     float64       // reference point, px
	U, V     float64       // displacement u = x − X, px
	F        [2][2]float64 // deformation gradient
	Material bool          // false inside a hole: U, V, F are then zero/identity
}

// At returns the exact displacement and deformation gradient of m at the
// reference point (X, Y).
func At(m Motion, X, Y float64) Truth {
	t := Truth{X: X, Y: Y, Material: true, F: [2][2]float64{{1, 0}, {0, 1}}}
	if b, ok := m.(Body); ok && !b.Material(X, Y) {
		t.Material = false
		return t
	}
	x, y := m.Map(X, Y)
	t.U, t.V = x-X, y-Y
	t.F = m.Gradient(X, Y)
	return t
}

// Grid returns At for the nx×ny reference points (x0 + i·step, y0 + j·step),
// row-major (index j·nx + i).
func Grid(m Motion, x0, y0, step float64, nx, ny int) []Truth {
	out := make([]Truth, 0, max(nx*ny, 0))
	for j := 0; j < ny; j++ {
		for i := 0; i < nx; i++ {
			out = append(out, At(m, x0+float64(i)*step, y0+float64(j)*step))
		}
	}
	return out
}

// reference is the identity motion on the body of another motion, so the
// reference image of a plate with a hole shows the hole.
type reference struct {
	Identity
	body Body
}

// Material reports whether X is material in the body.
func (r reference) Material(X, Y float64) bool { return r.body.Material(X, Y) }

// Scale returns r: the reference state does not change with load.
func (r reference) Scale(float64) Motion { return r }

// Inverse returns x, or ErrNoMaterial outside the body.
func (r reference) Inverse(x, y float64) (float64, float64, error) {
	if !r.body.Material(x, y) {
		return x, y, fmt.Errorf("%w: (%g, %g)", ErrNoMaterial, x, y)
	}
	return x, y, nil
}

// Reference returns the motion to render the reference image of m with:
// the identity, restricted to m's body when m has holes (see Body).
func Reference(m Motion) Motion {
	if b, ok := m.(Body); ok {
		return reference{body: b}
	}
	return Identity{}
}

// Package field holds the result of one analysis (a grid of points in the
// reference image, named quantities on it, a status per point, the
// parameters, units and metadata) and writes it to open file formats:
// JSON (field.json, readable back with [ReadJSON]), CSV, VTK XML structured
// grid (.vts) and NumPy arrays (.npy, .npz).
//
// Values of invalid points are NaN in memory; each format says how it writes
// them (null in JSON, an empty cell in CSV, NaN in VTK and NPY).
//
// Results can feed safety decisions only with care: every value carries a
// measurement uncertainty (see the std_* quantities and Meta), strains
// should be confirmed with a calibrated extensometer, and design decisions
// belong to local codes and licensed engineers. [Cautions] returns this text
// for reports.
package field

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"slices"
	"sort"
	"time"

	"gonum.org/v1/gonum/stat"
)

// FormatName identifies field.json files.
const FormatName = "mottle-field"

// Version is the version of the field layout written by this package.
const Version = 1

// Field is the result of one analysis.
type Field struct {
	// Version of the layout, [Version] for fields made by this package.
	Version int
	// Params are the analysis parameters used, as JSON (may be nil).
	Params json.RawMessage
	// Grid gives the reference-image position of every point.
	Grid Grid
	// Units maps a quantity name to its unit: "px" or "mm" for
	// displacements, "1" for strains and F, "deg" for angles.
	Units map[string]string
	// Quantities maps a name (see [CanonicalNames]) to one value per point,
	// row-major, NaN where invalid.
	Quantities map[string][]float64
	// Status holds one reason per point: "ok", or why the point has no (or
	// a partial) result, e.g. "outside", "low_contrast", "diverged",
	// "low_zncc", "unreached", "too_few_neighbours", "non_invertible".
	Status []string
	// Meta describes how the field was made.
	Meta Meta
}

// Grid is the lattice of subset centres. Point (i, j), for 0 ≤ i < Nx and
// 0 ≤ j < Ny, has index j·Nx + i and sits at (X[k], Y[k]) in reference-image
// pixel coordinates (pixel centres at integers, x right, y down).
type Grid struct {
	Nx     int       `json:"nx"`
	Ny     int       `json:"ny"`
	Step   int       `json:"step"`   // grid spacing, px
	Subset int       `json:"subset"` // subset side, px
	X      []float64 `json:"x"`
	Y      []float64 `json:"y"`
}

// Len returns the number of points, Nx·Ny.
func (g Grid) Len() int { return g.Nx * g.Ny }

// Meta describes how a field was made. Zero values mean "not known".
type Meta struct {
	Software     string    `json:"software,omitempty"`      // program and version
	Created      time.Time `json:"created"`                 // when the analysis ran
	Reference    string    `json:"reference,omitempty"`     // reference image name
	Deformed     string    `json:"deformed,omitempty"`      // deformed image name
	ImageWidth   int       `json:"image_width,omitempty"`   // px
	ImageHeight  int       `json:"image_height,omitempty"`  // px
	NoiseSigma   float64   `json:"noise_sigma,omitempty"`   // image noise σ, grey levels
	VSG          float64   `json:"vsg_px,omitempty"`        // virtual strain gauge, px
	StrainWindow int       `json:"strain_window,omitempty"` // grid points
	StrainFit    string    `json:"strain_fit,omitempty"`    // "plane" or "quadratic"
	// PrincipalOf names the strain tensor E_max, E_min, E_max_angle_deg and
	// von_mises are computed from, e.g. "green_lagrange".
	PrincipalOf string  `json:"principal_of,omitempty"`
	MMPerPx     float64 `json:"mm_per_px,omitempty"` // scale, 0 = uncalibrated
	// Precision is the precision in which the quantities are written:
	// [Float32] or "" (float64). See [Float32].
	Precision string `json:"precision,omitempty"`
	// Cautions are warnings to show with the results.
	Cautions []string `json:"cautions,omitempty"`
	// Extra holds further key–value metadata (JSON-encodable).
	Extra map[string]any `json:"extra,omitempty"`
}

// Float32 is the value of [Meta.Precision] of a field whose quantities
// are written as IEEE 754 single precision: JSON and CSV numbers are the
// shortest text that reads back to the same float32, NPY arrays are '<f4'
// and VTS arrays Float32. Grid coordinates are whole pixels and exact in
// either precision. A field holds float32 precision when its inputs do: a
// result correlated from float32 grey levels and float32 B-spline
// coefficients resolves no more than float32's 24-bit mantissa (relative
// 6e-8), far below the measurement uncertainty of every quantity (see the
// std_* quantities). Values in memory stay float64; they are rounded to
// nearest only when written.
const Float32 = "float32"

// Rounded returns f as its files hold it: for a [Float32] field a copy
// whose quantities are rounded to the nearest float32 (beyond float32's
// range to ±Inf), sharing the grid, status and metadata; else f itself.
// Everything drawn or derived from a written field (maps, the spatial view)
// starts from Rounded, so that it is the same whether it is made with the
// analysis or later from the stored result.
func (f *Field) Rounded() *Field {
	if !f.single() {
		return f
	}
	g := *f
	g.Quantities = make(map[string][]float64, len(f.Quantities))
	for n, q := range f.Quantities {
		r := make([]float64, len(q))
		for k, x := range q {
			r[k] = float64(float32(x))
		}
		g.Quantities[n] = r
	}
	return &g
}

// single reports whether f is written in float32 precision.
func (f *Field) single() bool { return f.Meta.Precision == Float32 }

// Cautions returns the standard cautions to show with strain results.
func Cautions() []string {
	return []string{
		"Every value carries a measurement uncertainty; see std_u, std_v and std_E* and the noise level in meta.",
		"Confirm strains used for acceptance or design with a calibrated extensometer.",
		"Design and safety decisions belong to the applicable codes and a licensed engineer.",
	}
}

// CanonicalNames returns the standard quantity names in their canonical
// order (indices 1 = x, 2 = y). [Field.Names] lists these first.
func CanonicalNames() []string {
	return []string{
		"u", "v", "F11", "F12", "F21", "F22",
		"E11", "E22", "E12",
		"H11", "H22", "H12",
		"A11", "A22", "A12",
		"eps11", "eps22", "eps12",
		"rotation_deg", "E_max", "E_min", "E_max_angle_deg", "von_mises", "detF",
		"zncc", "std_u", "std_v", "valid",
		"std_E11", "std_E22", "std_E12", "eps_valid",
	}
}

// Describe returns a one-line description of a standard quantity, or "" for
// an unknown name.
func Describe(name string) string {
	d := map[string]string{
		"u":               "displacement along x, x − X (Lagrangian, at the reference position)",
		"v":               "displacement along y (down), y − Y",
		"F11":             "deformation gradient ∂x/∂X",
		"F12":             "deformation gradient ∂x/∂Y",
		"F21":             "deformation gradient ∂y/∂X",
		"F22":             "deformation gradient ∂y/∂Y",
		"E11":             "Green–Lagrange strain E = ½(FᵀF − I), xx",
		"E22":             "Green–Lagrange strain, yy",
		"E12":             "Green–Lagrange strain, xy (tensor component, half the engineering shear)",
		"H11":             "Hencky (logarithmic) strain ln U, xx",
		"H22":             "Hencky strain, yy",
		"H12":             "Hencky strain, xy",
		"A11":             "Euler–Almansi strain A = ½(I − F⁻ᵀF⁻¹), xx",
		"A22":             "Euler–Almansi strain, yy",
		"A12":             "Euler–Almansi strain, xy",
		"eps11":           "small strain ½(∇u + ∇uᵀ), xx; NaN where the rotation is too large for it",
		"eps22":           "small strain, yy",
		"eps12":           "small strain, xy",
		"eps_valid":       "1 where the small strain is usable (rotation within the limit), else 0",
		"rotation_deg":    "rotation of F = RU; positive turns +x toward +y (clockwise on screen)",
		"E_max":           "largest principal strain of the tensor that principal_of names (Green–Lagrange by default)",
		"E_min":           "smallest principal strain of that tensor",
		"E_max_angle_deg": "direction of E_max from +x toward +y (clockwise on screen)",
		"von_mises":       "von Mises equivalent strain (2/√3)·√(E_max² + E_max·E_min + E_min²)",
		"detF":            "det F, the area ratio; ≤ 0 is non-physical",
		"zncc":            "zero-normalised cross-correlation of the matched subset",
		"std_u":           "predicted standard deviation of u",
		"std_v":           "predicted standard deviation of v",
		"valid":           "1 where the displacement is valid, else 0",
		"std_E11":         "propagated standard deviation of E11",
		"std_E22":         "propagated standard deviation of E22",
		"std_E12":         "propagated standard deviation of E12",
	}
	return d[name]
}

// New returns a field on the nx×ny lattice with its first point at
// (x0, y0) and the given step and subset, with X, Y filled, every status
// "ok", no quantities, Version set and Units empty.
func New(nx, ny, x0, y0, step, subset int) *Field {
	n := max(nx, 0) * max(ny, 0)
	g := Grid{Nx: nx, Ny: ny, Step: step, Subset: subset, X: make([]float64, n), Y: make([]float64, n)}
	for j := range max(ny, 0) {
		for i := range max(nx, 0) {
			g.X[j*nx+i] = float64(x0 + i*step)
			g.Y[j*nx+i] = float64(y0 + j*step)
		}
	}
	st := make([]string, n)
	for k := range st {
		st[k] = "ok"
	}
	return &Field{Version: Version, Grid: g, Units: map[string]string{}, Quantities: map[string][]float64{}, Status: st}
}

// Set stores a quantity with its unit, replacing any previous one. It returns
// an error if values does not have one value per point.
func (f *Field) Set(name, unit string, values []float64) error {
	if len(values) != f.Grid.Len() {
		return fmt.Errorf("quantity %q: %d values, want %d (grid %d×%d)", name, len(values), f.Grid.Len(), f.Grid.Nx, f.Grid.Ny)
	}
	if name == "" {
		return errors.New("quantity with an empty name")
	}
	if f.Quantities == nil {
		f.Quantities = map[string][]float64{}
	}
	if f.Units == nil {
		f.Units = map[string]string{}
	}
	f.Quantities[name] = values
	f.Units[name] = unit
	return nil
}

// Get returns the values of quantity name and whether it exists.
func (f *Field) Get(name string) ([]float64, bool) {
	q, ok := f.Quantities[name]
	return q, ok
}

// Names returns the names of the quantities present: those of
// [CanonicalNames] first, in that order, then any others sorted
// alphabetically.
func (f *Field) Names() []string {
	names := make([]string, 0, len(f.Quantities))
	canon := CanonicalNames()
	for _, n := range canon {
		if _, ok := f.Quantities[n]; ok {
			names = append(names, n)
		}
	}
	var rest []string
	for n := range f.Quantities {
		if !slices.Contains(canon, n) {
			rest = append(rest, n)
		}
	}
	sort.Strings(rest)
	return append(names, rest...)
}

// Validate reports every structural problem at once: grid size and
// coordinate counts, quantity lengths, status count, and metadata values that
// cannot be written (non-finite numbers).
func (f *Field) Validate() error {
	var errs []error
	g := f.Grid
	if g.Nx < 1 || g.Ny < 1 {
		errs = append(errs, fmt.Errorf("grid %d×%d: want at least 1×1 points", g.Nx, g.Ny))
	}
	n := g.Len()
	if len(g.X) != n || len(g.Y) != n {
		errs = append(errs, fmt.Errorf("grid coordinates: %d x and %d y values, want %d", len(g.X), len(g.Y), n))
	}
	for k := range min(len(g.X), len(g.Y)) {
		if !finite(g.X[k]) || !finite(g.Y[k]) {
			errs = append(errs, fmt.Errorf("grid point %d at (%v, %v): want finite coordinates", k, g.X[k], g.Y[k]))
			break
		}
	}
	for _, name := range f.Names() {
		if q := f.Quantities[name]; len(q) != n {
			errs = append(errs, fmt.Errorf("quantity %q: %d values, want %d", name, len(q), n))
		}
		if !validName(name) {
			errs = append(errs, fmt.Errorf("quantity name %q: use 1 to 64 letters, digits and _ only", name))
		} else if reservedName(name) {
			errs = append(errs, fmt.Errorf("quantity name %q: reserved for a column or file of its own (i, j, x, y, status, grid_x, grid_y)", name))
		}
	}
	if f.Status != nil && len(f.Status) != n {
		errs = append(errs, fmt.Errorf("status: %d entries, want %d", len(f.Status), n))
	}
	if !finite(f.Meta.NoiseSigma) || !finite(f.Meta.VSG) || !finite(f.Meta.MMPerPx) {
		errs = append(errs, fmt.Errorf("meta: noise_sigma %v, vsg_px %v, mm_per_px %v: want finite numbers (0 = unknown)", f.Meta.NoiseSigma, f.Meta.VSG, f.Meta.MMPerPx))
	}
	if p := f.Meta.Precision; p != "" && p != Float32 {
		errs = append(errs, fmt.Errorf("meta: precision %q: want %q or empty (float64)", p, Float32))
	}
	if f.Params != nil && !json.Valid(f.Params) {
		errs = append(errs, errors.New("params: not valid JSON"))
	}
	return errors.Join(errs...)
}

func validName(s string) bool {
	if s == "" || len(s) > 64 {
		return false
	}
	for _, r := range s {
		if !(r == '_' || r >= '0' && r <= '9' || r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z') {
			return false
		}
	}
	return true
}

func reservedName(s string) bool {
	switch s {
	case "i", "j", "x", "y", "status", "grid_x", "grid_y":
		return true
	}
	return false
}

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

// Stats summarises a quantity over its valid (finite) points.
type Stats struct {
	Count int     // number of finite values
	Mean  float64 // arithmetic mean
	Std   float64 // sample standard deviation (n − 1 in the denominator); 0 for one value
	Min   float64
	Max   float64
}

// Summary returns the statistics of quantity name over its finite values.
// With no finite value, Count is 0 and the other fields are NaN. It returns
// an error if the quantity does not exist.
func (f *Field) Summary(name string) (Stats, error) {
	q, ok := f.Quantities[name]
	if !ok {
		return Stats{}, fmt.Errorf("summary: no quantity %q (have %v)", name, f.Names())
	}
	return Summarize(q), nil
}

// Summarize returns the statistics of the finite values of x.
func Summarize(x []float64) Stats {
	v := make([]float64, 0, len(x))
	for _, a := range x {
		if finite(a) {
			v = append(v, a)
		}
	}
	if len(v) == 0 {
		n := math.NaN()
		return Stats{Mean: n, Std: n, Min: n, Max: n}
	}
	s := Stats{Count: len(v), Min: v[0], Max: v[0]}
	for _, a := range v {
		s.Min, s.Max = min(s.Min, a), max(s.Max, a)
	}
	if len(v) == 1 {
		s.Mean = v[0]
		return s
	}
	s.Mean, s.Std = stat.MeanStdDev(v, nil)
	return s
}

// StatusCounts returns how many points have each status.
func (f *Field) StatusCounts() map[string]int {
	c := map[string]int{}
	for _, s := range f.Status {
		c[s]++
	}
	return c
}

// DefaultUnit returns the unit of a standard quantity when lengths are in
// length ("px" or "mm"): length for u, v, std_u, std_v; "deg" for
// rotation_deg and E_max_angle_deg; "1" (dimensionless) for everything
// else, including F, every strain, detF, zncc and valid.
func DefaultUnit(name, length string) string {
	switch name {
	case "u", "v", "std_u", "std_v":
		return length
	case "rotation_deg", "E_max_angle_deg":
		return "deg"
	}
	return "1"
}

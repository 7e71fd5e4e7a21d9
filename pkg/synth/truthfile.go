package synth

// TruthPoint is the exact motion at one reference point, as written to
// truth files.
type TruthPoint struct {
	X        float64 `json:"X"`
	Y        float64 `json:"Y"`
	U        float64 `json:"u"`
	V        float64 `json:"v"`
	F11      float64 `json:"F11"`
	F12      float64 `json:"F12"`
	F21      float64 `json:"F21"`
	F22      float64 `json:"F22"`
	Material bool    `json:"material"`
}

// GridSpec is a regular grid of reference points (X0 + i·Step, Y0 + j·Step),
// i < NX, j < NY.
type GridSpec struct {
	X0   float64 `json:"x0"`
	Y0   float64 `json:"y0"`
	Step float64 `json:"step"`
	NX   int     `json:"nx"`
	NY   int     `json:"ny"`
}

// ImageGrid returns the grid with the given step that starts at
// (offset, offset) and covers a w×h image.
func ImageGrid(w, h int, step, offset float64) GridSpec {
	if !(step > 0) {
		return GridSpec{X0: offset, Y0: offset, Step: step}
	}
	n := func(size int) int {
		if float64(size-1) < offset {
			return 0
		}
		return int((float64(size-1)-offset)/step) + 1
	}
	return GridSpec{X0: offset, Y0: offset, Step: step, NX: n(w), NY: n(h)}
}

// TruthPoints returns the exact motion of m on the grid, row-major.
func TruthPoints(m Motion, g GridSpec) []TruthPoint {
	tr := Grid(m, g.X0, g.Y0, g.Step, g.NX, g.NY)
	out := make([]TruthPoint, len(tr))
	for i, t := range tr {
		out[i] = TruthPoint{X: t.X, Y: t.Y, U: t.U, V: t.V,
			F11: t.F[0][0], F12: t.F[0][1], F21: t.F[1][0], F22: t.F[1][1], Material: t.Material}
	}
	return out
}

// TruthFrame is the truth of one deformed image in a truth file.
type TruthFrame struct {
	Frame
	File   string       `json:"file"`
	Spec   Spec         `json:"motion"`
	Report Report       `json:"report"`
	Points []TruthPoint `json:"points"`
}

// TruthFile is the JSON truth file written beside synthetic images: how
// they were made and the exact motion on a grid of reference points.
// Displacements are in px, Lagrangian (u = x − X at reference point X).
type TruthFile struct {
	Generator string         `json:"generator"`
	Width     int            `json:"width"`
	Height    int            `json:"height"`
	Bits      int            `json:"bits"`
	Reference string         `json:"reference"`
	Pattern   PatternOptions `json:"pattern"`
	Speckles  int            `json:"speckles"`
	Render    RenderOptions  `json:"render"`
	Grid      GridSpec       `json:"grid"`
	Frames    []TruthFrame   `json:"frames"`
	Notes     []string       `json:"notes,omitempty"`
	// Tensile is the truth of an invented tensile test (mottle synth
	// --test tensile): its law, true properties and per-frame strains.
	Tensile *TensileTruth `json:"tensile_test,omitempty"`
}

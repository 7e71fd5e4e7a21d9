package correlate

import (
	"fmt"
	"strconv"
)

// Shape selects the subset shape function.
type Shape int

const (
	// First is the affine (6-parameter) shape function.
	First Shape = 1
	// Second is the quadratic (12-parameter) shape function (Lu & Cary 2000).
	Second Shape = 2
)

// Shape parameter indices in Point.P. The displacement of a subset pixel at
// offset (dx, dy) from the centre is
//
//	u(dx, dy) = P[U] + P[Ux]dx + P[Uy]dy + ½P[Uxx]dx² + P[Uxy]dx·dy + ½P[Uyy]dy²
//	v(dx, dy) = P[V] + P[Vx]dx + P[Vy]dy + ½P[Vxx]dx² + P[Vxy]dx·dy + ½P[Vyy]dy²
//
// First-order results leave the second-order entries zero.
const (
	U = iota
	Ux
	Uy
	V
	Vx
	Vy
	Uxx
	Uxy
	Uyy
	Vxx
	Vxy
	Vyy
)

// Status says whether a grid point was measured and, if not, why.
type Status uint8

const (
	// OK: converged and above the ZNCC threshold.
	OK Status = iota
	// Outside: the subset does not lie wholly inside the image and ROI.
	Outside
	// LowContrast: the reference subset has too little intensity variation.
	LowContrast
	// Diverged: IC-GN did not converge.
	Diverged
	// LowZNCC: converged, but the match is below the ZNCC threshold.
	LowZNCC
	// Unreached: inside the ROI but not connected to any seed by propagation.
	Unreached
	// LeftImage: the warped subset reaches past the usable area of the
	// deformed image (typically near the image border, where material has
	// moved out of view).
	LeftImage
)

// Point is the result at one grid point. Its subset centre (X, Y) is in
// reference-image pixel coordinates (pixel centres at integers).
type Point struct {
	X, Y      float64
	P         [12]float64 // shape parameters, indexed by U, Ux, …
	ZNCC      float64
	Iter      int
	Converged bool
	Status    Status
	StdU      float64 // predicted standard deviation of u, px
	StdV      float64 // predicted standard deviation of v, px
}

// Grid is the regular lattice of subset centres: point (i, j) sits at
// (X0 + i·Step, Y0 + j·Step), and results are stored row-major, index j·Nx + i.
type Grid struct {
	X0, Y0 int
	Step   int
	Nx, Ny int
}

var statusNames = [...]string{
	OK:          "ok",
	Outside:     "outside",
	LowContrast: "low_contrast",
	Diverged:    "diverged",
	LowZNCC:     "low_zncc",
	Unreached:   "unreached",
	LeftImage:   "left_image",
}

// String returns the status name used in result files: "ok", "outside",
// "low_contrast", "diverged", "low_zncc", "unreached" or "left_image".
func (s Status) String() string {
	if int(s) < len(statusNames) {
		return statusNames[s]
	}
	return "Status(" + strconv.Itoa(int(s)) + ")"
}

// MarshalText encodes the status by its name, so JSON shows "ok", "diverged", ….
func (s Status) MarshalText() ([]byte, error) {
	if int(s) >= len(statusNames) {
		return nil, fmt.Errorf("correlate: unknown status %d", int(s))
	}
	return []byte(statusNames[s]), nil
}

// UnmarshalText decodes a status name written by MarshalText.
func (s *Status) UnmarshalText(b []byte) error {
	for i, n := range statusNames {
		if n == string(b) {
			*s = Status(i)
			return nil
		}
	}
	return fmt.Errorf("correlate: unknown status %q: want one of ok, outside, low_contrast, diverged, low_zncc, unreached, left_image", b)
}

// Len returns the number of grid points, Nx·Ny.
func (g Grid) Len() int { return g.Nx * g.Ny }

// At returns the reference position of grid point (i, j).
func (g Grid) At(i, j int) (x, y int) { return g.X0 + i*g.Step, g.Y0 + j*g.Step }

// Index returns the row-major index j·Nx + i of grid point (i, j).
func (g Grid) Index(i, j int) int { return j*g.Nx + i }

// Displacement returns the displacement (u, v) predicted by the point's
// shape function at offset (dx, dy) from its subset centre.
func (p *Point) Displacement(dx, dy float64) (u, v float64) {
	return Displacement(&p.P, dx, dy)
}

// Displacement evaluates the shape function P at offset (dx, dy) from the
// subset centre: u(dx, dy) and v(dx, dy) as documented for the indices U … Vyy.
func Displacement(P *[12]float64, dx, dy float64) (u, v float64) {
	xx, xy, yy := dx*dx/2, dx*dy, dy*dy/2
	u = P[U] + P[Ux]*dx + P[Uy]*dy + P[Uxx]*xx + P[Uxy]*xy + P[Uyy]*yy
	v = P[V] + P[Vx]*dx + P[Vy]*dy + P[Vxx]*xx + P[Vxy]*xy + P[Vyy]*yy
	return u, v
}

// Recentre returns the shape parameters of the same displacement field
// expanded about the offset (dx, dy) instead of the subset centre: the
// displacement and its first derivatives there, and the unchanged second
// derivatives. It is the starting guess that propagation hands from a point
// to its neighbour, and what a series engine uses to carry a solution to a
// nearby position.
func Recentre(P [12]float64, dx, dy float64) [12]float64 {
	q := P
	q[U], q[V] = Displacement(&P, dx, dy)
	q[Ux] = P[Ux] + P[Uxx]*dx + P[Uxy]*dy
	q[Uy] = P[Uy] + P[Uxy]*dx + P[Uyy]*dy
	q[Vx] = P[Vx] + P[Vxx]*dx + P[Vxy]*dy
	q[Vy] = P[Vy] + P[Vxy]*dx + P[Vyy]*dy
	return q
}

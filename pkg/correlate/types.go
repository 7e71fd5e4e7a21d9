// Package correlate tracks speckle subsets from a reference image into a
// deformed image: integer ZNCC search from seed points, subpixel inverse
// compositional Gauss–Newton (IC-GN) refinement with first- or second-order
// shape functions, and reliability-guided propagation over a grid.
package correlate

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
	// Diverged: IC-GN did not converge or left the image.
	Diverged
	// LowZNCC: converged, but the match is below the ZNCC threshold.
	LowZNCC
	// Unreached: inside the ROI but not connected to any seed by propagation.
	Unreached
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

package kinematics

import (
	"context"
	"errors"
	"fmt"
	"math"
	"runtime"
	"sync"
)

// Grid is a regular lattice of points: point (i, j) sits at
// (X0 + i·Step, Y0 + j·Step) in pixels, for 0 ≤ i < Nx, 0 ≤ j < Ny, and
// values on it are stored row-major, index j·Nx + i.
type Grid struct {
	X0, Y0 float64
	Step   float64
	Nx, Ny int
}

// Len returns the number of points, Nx·Ny.
func (g Grid) Len() int { return g.Nx * g.Ny }

// At returns the coordinates of point (i, j).
func (g Grid) At(i, j int) (x, y float64) {
	return g.X0 + float64(i)*g.Step, g.Y0 + float64(j)*g.Step
}

// Validate reports every problem with g at once.
func (g Grid) Validate() error {
	var errs []error
	if g.Nx < 1 || g.Ny < 1 {
		errs = append(errs, fmt.Errorf("grid size %d×%d: want at least 1×1", g.Nx, g.Ny))
	}
	if !(g.Step > 0) || math.IsInf(g.Step, 0) {
		errs = append(errs, fmt.Errorf("grid step %v: want a positive, finite spacing in px", g.Step))
	}
	if math.IsNaN(g.X0) || math.IsInf(g.X0, 0) || math.IsNaN(g.Y0) || math.IsInf(g.Y0, 0) {
		errs = append(errs, fmt.Errorf("grid origin (%v, %v): want finite coordinates", g.X0, g.Y0))
	}
	return errors.Join(errs...)
}

// Fit selects the local surface fitted to each displacement component over
// the strain window.
type Fit int

const (
	// Plane fits a + b·X + c·Y (Pan, Asundi, Xie & Gao 2009).
	Plane Fit = 1
	// Quadratic fits a + b·X + c·Y + d·X² + e·XY + f·Y²; the gradient is
	// taken at the window centre. It follows strain gradients better at the
	// cost of more noise.
	Quadratic Fit = 2
)

// String returns "plane" or "quadratic".
func (f Fit) String() string {
	switch f {
	case Plane:
		return "plane"
	case Quadratic:
		return "quadratic"
	}
	return fmt.Sprintf("Fit(%d)", int(f))
}

// ParseFit returns the Fit named s ("plane" or "quadratic"; "" = plane).
func ParseFit(s string) (Fit, error) {
	switch s {
	case "", "plane":
		return Plane, nil
	case "quadratic":
		return Quadratic, nil
	}
	return 0, fmt.Errorf("strain fit %q: want plane or quadratic", s)
}

func (f Fit) terms() int {
	if f == Quadratic {
		return 6
	}
	return 3
}

// GradientOptions configure [Gradients]. The zero value of each field selects
// its documented default.
type GradientOptions struct {
	// Window is the side of the strain window in grid points, odd and ≥ 3.
	// Default 5.
	Window int
	// Fit is the local surface. Default Plane.
	Fit Fit
	// MinPoints is the least number of valid points in the window for a fit.
	// Default 6 for Plane, 10 for Quadratic; it must exceed the number of
	// fitted terms (3 or 6) so that the fit is over-determined.
	MinPoints int
	// Threads is the number of goroutines; 0 = GOMAXPROCS. Results do not
	// depend on it.
	Threads int
	// Subset is the side in px of the square subsets the displacements
	// were measured with, for the propagated std: where it exceeds the
	// grid step, neighbouring subsets share pixels and their errors are
	// correlated (see [Gradients]). 0 treats the points' errors as
	// independent.
	Subset float64
}

// DefaultWindow is the default strain window side in grid points
// (GradientOptions.Window): the smallest odd window that fits a plane
// over more than its three terms in both directions with a margin
// (common practice).
const DefaultWindow = 5

// withDefaults returns o with zero fields replaced by their defaults.
func (o GradientOptions) withDefaults() GradientOptions {
	if o.Window == 0 {
		o.Window = DefaultWindow
	}
	if o.Fit == 0 {
		o.Fit = Plane
	}
	if o.MinPoints == 0 {
		if o.Fit == Quadratic {
			o.MinPoints = 10
		} else {
			o.MinPoints = 6
		}
	}
	if o.Threads == 0 {
		o.Threads = runtime.GOMAXPROCS(0)
	}
	return o
}

// Validate reports every problem with o (after defaults) at once.
func (o GradientOptions) Validate() error {
	o = o.withDefaults()
	var errs []error
	if o.Window < 3 || o.Window%2 == 0 || o.Window > 101 {
		errs = append(errs, fmt.Errorf("strain window %d: want an odd number of grid points from 3 to 101", o.Window))
	}
	if o.Fit != Plane && o.Fit != Quadratic {
		errs = append(errs, fmt.Errorf("strain fit %v: want Plane or Quadratic", o.Fit))
	} else {
		if o.MinPoints <= o.Fit.terms() {
			errs = append(errs, fmt.Errorf("minimum points %d: a %v fit has %d terms and needs more points than that", o.MinPoints, o.Fit, o.Fit.terms()))
		}
		if o.Window >= 3 && o.MinPoints > o.Window*o.Window {
			errs = append(errs, fmt.Errorf("minimum points %d: more than the %d points of a %d×%d window", o.MinPoints, o.Window*o.Window, o.Window, o.Window))
		}
	}
	if o.Threads < 0 {
		errs = append(errs, fmt.Errorf("threads %d: want 0 (all cores) or a positive count", o.Threads))
	}
	if !(o.Subset >= 0) || math.IsInf(o.Subset, 0) {
		errs = append(errs, fmt.Errorf("subset %v px: want the subset side in px, or 0 for independent errors", o.Subset))
	}
	return errors.Join(errs...)
}

// VSG returns the virtual strain gauge size in px,
// (window − 1)·step + subset, the side of the image region that contributes
// to one strain value (iDICs, A Good Practices Guide for Digital Image
// Correlation, Jones & Iadicola (eds.), 2018; form from memory).
func VSG(window int, step, subset float64) float64 {
	return float64(window-1)*step + subset
}

// GradStatus says whether a strain value was computed at a point.
type GradStatus uint8

const (
	// GradOK: the fit succeeded.
	GradOK GradStatus = iota
	// GradInvalidPoint: the point itself has no valid displacement.
	GradInvalidPoint
	// GradTooFewNeighbours: fewer valid points in the window than MinPoints.
	GradTooFewNeighbours
	// GradDegenerate: enough points, but they lie so that the surface is not
	// determined (for example all on one line).
	GradDegenerate
)

// String returns the status as used in result files: "ok", "invalid",
// "too_few_neighbours" or "degenerate_window".
func (s GradStatus) String() string {
	switch s {
	case GradOK:
		return "ok"
	case GradInvalidPoint:
		return "invalid"
	case GradTooFewNeighbours:
		return "too_few_neighbours"
	case GradDegenerate:
		return "degenerate_window"
	}
	return fmt.Sprintf("GradStatus(%d)", int(s))
}

// Gradient is the local least-squares fit at one grid point.
type Gradient struct {
	// U, V are the fitted (smoothed) displacements at the point, px.
	U, V float64
	// Ux = ∂u/∂X, Uy = ∂u/∂Y, Vx = ∂v/∂X, Vy = ∂v/∂Y (dimensionless).
	Ux, Uy, Vx, Vy float64
	// Variances and covariances of (Ux, Uy) and of (Vx, Vy) propagated from
	// the per-point std of u and v; NaN when no std was given. u and v are
	// fitted from separate data, so (Ux, Uy) and (Vx, Vy) are uncorrelated.
	VarUx, VarUy, CovUxUy float64
	VarVx, VarVy, CovVxVy float64
	// N is the number of valid points the fit used (0 when none).
	N int
	// Status says whether the fit succeeded; the other fields are NaN if not.
	Status GradStatus
}

// F returns the deformation gradient I + ∂u/∂X of the fit.
func (g Gradient) F() Tensor { return FromGradient(g.Ux, g.Uy, g.Vx, g.Vy) }

// StdGreenLagrange returns the standard deviations of E11, E22 and E12
// propagated to first order from the gradient covariances:
//
//	E11 = Ux + ½(Ux² + Vx²),  E22 = Vy + ½(Uy² + Vy²),
//	E12 = ½(Uy + Vx + Ux·Uy + Vx·Vy),
//
// σ² = J Σ Jᵀ with J the Jacobian of each component with respect to
// (Ux, Uy, Vx, Vy) and Σ the block-diagonal covariance (u and v blocks).
// For small strains they reduce to the std of Ux, Vy and ½(Uy + Vx).
func (g Gradient) StdGreenLagrange() (s11, s22, s12 float64) {
	// Var of a·Ux + b·Uy + c·Vx + d·Vy.
	v := func(a, b, c, d float64) float64 {
		return a*a*g.VarUx + b*b*g.VarUy + 2*a*b*g.CovUxUy + c*c*g.VarVx + d*d*g.VarVy + 2*c*d*g.CovVxVy
	}
	s11 = math.Sqrt(v(1+g.Ux, 0, g.Vx, 0))
	s22 = math.Sqrt(v(0, g.Uy, 0, 1+g.Vy))
	s12 = math.Sqrt(v(g.Uy/2, (1+g.Ux)/2, (1+g.Vy)/2, g.Vx/2))
	return s11, s22, s12
}

// Gradients fits ∂u/∂X at every point of grid g by pointwise local least
// squares over a Window×Window neighbourhood (Pan, Asundi, Xie & Gao 2009,
// "Digital image correlation using iterative least squares and pointwise
// least squares for displacement field and strain field measurements",
// Opt. Lasers Eng. 47:865).
//
// u and v hold the displacements in px, row-major on g; a point is valid when
// both are finite. stdU and stdV hold the standard deviation of each point's
// u and v, or are nil when unknown. Points near holes and edges use the valid
// neighbours they have, provided there are at least MinPoints and they
// determine the surface; Gradient.N says how many were used.
//
// Uncertainty is propagated to first order: each fitted coefficient is a
// linear combination a = Σ g_k u_k of the data, so Var(a) = Σ_k Σ_l g_k g_l
// σ_k σ_l ρ_kl (JCGM 100:2008, "Guide to the expression of uncertainty in
// measurement", 5.2). With GradientOptions.Subset = 0 the points' errors
// are taken as independent (ρ_kl = 0 for k ≠ l). Otherwise neighbouring
// subsets that share pixels (step < subset) have correlated errors: the
// noise part of a subset's displacement is, to first order, a weighted sum
// of the image noise over its pixels (the linearised estimator of Wang,
// Li, Tong & Ruan 2007, Exp. Mech. 47:701), so two subsets whose centres
// are (Δi, Δj) grid points apart correlate as the share of pixels they
// have in common, ρ = max(0, 1 − |Δi|·step/M)·max(0, 1 − |Δj|·step/M) for
// subsets of side M (with uniform intensity gradients over the subsets;
// the model is ours, from that estimator). Treating them as independent
// understated the strain std 1.8× at a 5-point window, subset 31, step 8,
// and 3× at 15 points on static rendered pairs.
//
// The cost is O(points · Window²), times 2·⌈Subset/step⌉ for the correlated
// std (about 2.7× the fit without std at subset 31, step 4); points are shared among Threads goroutines
// and the result does not depend on their number. It returns an error for
// invalid options, mismatched lengths or a cancelled context.
func Gradients(ctx context.Context, g Grid, u, v, stdU, stdV []float64, opt GradientOptions) ([]Gradient, error) {
	if err := errors.Join(g.Validate(), opt.Validate()); err != nil {
		return nil, fmt.Errorf("strain fit: %w", err)
	}
	opt = opt.withDefaults()
	n := g.Len()
	var errs []error
	if len(u) != n || len(v) != n {
		errs = append(errs, fmt.Errorf("strain fit: u and v have %d and %d values, want %d (grid %d×%d)", len(u), len(v), n, g.Nx, g.Ny))
	}
	if (stdU == nil) != (stdV == nil) {
		errs = append(errs, errors.New("strain fit: give both stdU and stdV, or neither"))
	} else if stdU != nil && (len(stdU) != n || len(stdV) != n) {
		errs = append(errs, fmt.Errorf("strain fit: stdU and stdV have %d and %d values, want %d", len(stdU), len(stdV), n))
	}
	if err := errors.Join(errs...); err != nil {
		return nil, err
	}

	out := make([]Gradient, n)
	f := newFitter(opt, g.Step)
	threads := min(opt.Threads, g.Ny)
	if threads <= 1 {
		for j := range g.Ny {
			if err := ctx.Err(); err != nil {
				return nil, fmt.Errorf("strain fit: %w", err)
			}
			f.row(g, j, u, v, stdU, stdV, out)
		}
		return out, nil
	}
	var wg sync.WaitGroup
	rows := make(chan int)
	for range threads {
		wg.Add(1)
		go func() {
			defer wg.Done()
			fl := f.clone()
			for j := range rows {
				fl.row(g, j, u, v, stdU, stdV, out)
			}
		}()
	}
	var err error
	for j := range g.Ny {
		if err = ctx.Err(); err != nil {
			break
		}
		rows <- j
	}
	close(rows)
	wg.Wait()
	if err != nil {
		return nil, fmt.Errorf("strain fit: %w", err)
	}
	return out, nil
}

// fitter holds the per-goroutine scratch of the least-squares fit.
type fitter struct {
	half, minPts, k int
	step            float64
	// Inverse normal matrix of a full window, shared read-only.
	fullInv *[6][6]float64
	// kern[d + r] is the error correlation of two points d grid steps
	// apart along one axis (SubsetCorrelation), for |d| ≤ r, the farthest
	// that share pixels; shared read-only, nil when the errors are
	// independent.
	kern []float64
	// Scratch.
	ni  [6][6]float64
	nrm [6][6]float64
	// w holds g₁σ and g₂σ of u and of v over the window (correlated
	// errors only); c the correlation-weighted sums, t a pass's output.
	w    [4][]float64
	c, t []float64
}

func newFitter(opt GradientOptions, step float64) *fitter {
	f := &fitter{half: opt.Window / 2, minPts: opt.MinPoints, k: opt.Fit.terms(), step: step}
	// Normal matrix of the full window.
	var nrm [6][6]float64
	for dj := -f.half; dj <= f.half; dj++ {
		for di := -f.half; di <= f.half; di++ {
			phi := f.basis(di, dj)
			for a := range f.k {
				for b := range f.k {
					nrm[a][b] += phi[a] * phi[b]
				}
			}
		}
	}
	var inv [6][6]float64
	if invertSPD(&nrm, &inv, f.k) {
		f.fullInv = &inv
	}
	if m := opt.Subset; m > step {
		r := 0
		for float64(r+1)*step < m {
			r++
		}
		f.kern = make([]float64, 2*r+1)
		for d := -r; d <= r; d++ {
			f.kern[d+r] = SubsetCorrelation(d, step, m)
		}
	}
	f.scratch()
	return f
}

// scratch gives f its own scratch slices for correlated errors.
func (f *fitter) scratch() {
	if f.kern == nil {
		return
	}
	n := (2*f.half + 1) * (2*f.half + 1)
	for a := range f.w {
		f.w[a] = make([]float64, n)
	}
	f.c, f.t = make([]float64, n), make([]float64, n)
}

func (f *fitter) clone() *fitter {
	c := *f
	c.scratch()
	return &c
}

// SubsetCorrelation returns the correlation of the displacement errors of
// two grid points d steps apart along one axis, measured with square
// subsets of side subset px on a grid of step px: the share of the
// subsets' pixels along that axis that the two have in common,
// max(0, 1 − |d|·step/subset). Two points (Δi, Δj) apart correlate as the
// product of the two axes' values (the model of [Gradients]).
func SubsetCorrelation(d int, step, subset float64) float64 {
	if d == 0 {
		return 1
	}
	return max(0, 1-float64(max(d, -d))*step/subset)
}

// filter returns the correlation-weighted sums c_p = Σ_q ρ(p − q) b_q
// over an nx×ny window, ρ(Δi, Δj) = kern[Δi + r]·kern[Δj + r] (zero
// beyond r), by a separable filter: along rows into f.t, then along
// columns into f.c, which it returns.
func (f *fitter) filter(b []float64, nx, ny int) []float64 {
	k := f.kern
	r := len(k) / 2
	for j := range ny {
		row, out := b[j*nx:(j+1)*nx], f.t[j*nx:(j+1)*nx]
		for i := range out {
			lo, hi := max(i-r, 0), min(i+r, nx-1)
			kk := k[lo-i+r : hi-i+r+1]
			s := 0.0
			for d, x := range row[lo : hi+1] {
				s += kk[d] * x
			}
			out[i] = s
		}
	}
	c := f.c[:nx*ny]
	clear(c)
	for j := range ny {
		lo, hi := max(j-r, 0), min(j+r, ny-1)
		out := c[j*nx : (j+1)*nx]
		for j2 := lo; j2 <= hi; j2++ {
			w := k[j2-j+r]
			for i, x := range f.t[j2*nx : (j2+1)*nx] {
				out[i] += w * x
			}
		}
	}
	return c
}

// dot returns Σ a_p c_p.
func dot(a, c []float64) float64 {
	s := 0.0
	for p, x := range a {
		s += x * c[p]
	}
	return s
}

// basis returns the design row at integer offset (di, dj), in grid units.
func (f *fitter) basis(di, dj int) [6]float64 {
	x, y := float64(di), float64(dj)
	return [6]float64{1, x, y, x * x, x * y, y * y}
}

// row fits every point of row j.
func (f *fitter) row(g Grid, j int, u, v, stdU, stdV []float64, out []Gradient) {
	for i := range g.Nx {
		out[j*g.Nx+i] = f.point(g, i, j, u, v, stdU, stdV)
	}
}

func valid(u, v []float64, p int) bool {
	return !math.IsNaN(u[p]) && !math.IsInf(u[p], 0) && !math.IsNaN(v[p]) && !math.IsInf(v[p], 0)
}

func (f *fitter) point(g Grid, i, j int, u, v, stdU, stdV []float64) Gradient {
	nan := math.NaN()
	res := Gradient{U: nan, V: nan, Ux: nan, Uy: nan, Vx: nan, Vy: nan,
		VarUx: nan, VarUy: nan, CovUxUy: nan, VarVx: nan, VarVy: nan, CovVxVy: nan}
	if !valid(u, v, j*g.Nx+i) {
		res.Status = GradInvalidPoint
		return res
	}
	h, k := f.half, f.k
	i0, i1 := max(i-h, 0), min(i+h, g.Nx-1)
	j0, j1 := max(j-h, 0), min(j+h, g.Ny-1)

	// Count valid points and, if the window is not complete, build its
	// normal matrix.
	cnt := 0
	for jj := j0; jj <= j1; jj++ {
		for ii := i0; ii <= i1; ii++ {
			if valid(u, v, jj*g.Nx+ii) {
				cnt++
			}
		}
	}
	res.N = cnt
	if cnt < f.minPts {
		res.Status = GradTooFewNeighbours
		return res
	}
	full := 2*h + 1
	var inv *[6][6]float64
	if cnt == full*full && f.fullInv != nil {
		inv = f.fullInv
	} else {
		f.nrm = [6][6]float64{}
		for jj := j0; jj <= j1; jj++ {
			for ii := i0; ii <= i1; ii++ {
				if !valid(u, v, jj*g.Nx+ii) {
					continue
				}
				phi := f.basis(ii-i, jj-j)
				for a := range k {
					for b := a; b < k; b++ {
						f.nrm[a][b] += phi[a] * phi[b]
					}
				}
			}
		}
		for a := range k {
			for b := 0; b < a; b++ {
				f.nrm[a][b] = f.nrm[b][a]
			}
		}
		if !invertSPD(&f.nrm, &f.ni, k) {
			res.Status = GradDegenerate
			return res
		}
		inv = &f.ni
	}

	// Coefficients are a = N⁻¹ Σ φ_k u_k; only a0 (value), a1 (∂/∂i) and
	// a2 (∂/∂j) are needed, through the rows g_m = N⁻¹ φ_k for m = 0, 1, 2.
	var au, av [3]float64
	var vu, vv [3]float64 // var of a1, var of a2, cov(a1, a2), for u and v
	withStd := stdU != nil
	corr := withStd && f.kern != nil
	nx, ny := i1-i0+1, j1-j0+1
	if corr {
		for a := range f.w {
			clear(f.w[a][:nx*ny])
		}
	}
	for jj := j0; jj <= j1; jj++ {
		for ii := i0; ii <= i1; ii++ {
			p := jj*g.Nx + ii
			if !valid(u, v, p) {
				continue
			}
			phi := f.basis(ii-i, jj-j)
			var gm [3]float64
			for m := range 3 {
				s := 0.0
				for b := range k {
					s += inv[m][b] * phi[b]
				}
				gm[m] = s
			}
			for m := range 3 {
				au[m] += gm[m] * u[p]
				av[m] += gm[m] * v[p]
			}
			if corr {
				l := (jj-j0)*nx + ii - i0
				f.w[0][l], f.w[1][l] = gm[1]*stdU[p], gm[2]*stdU[p]
				f.w[2][l], f.w[3][l] = gm[1]*stdV[p], gm[2]*stdV[p]
			} else if withStd {
				su2 := stdU[p] * stdU[p]
				sv2 := stdV[p] * stdV[p]
				vu[0] += gm[1] * gm[1] * su2
				vu[1] += gm[2] * gm[2] * su2
				vu[2] += gm[1] * gm[2] * su2
				vv[0] += gm[1] * gm[1] * sv2
				vv[1] += gm[2] * gm[2] * sv2
				vv[2] += gm[1] * gm[2] * sv2
			}
		}
	}
	if corr {
		w := f.w
		// Var(a1) = a1ᵀρa1, Cov(a1, a2) = a1ᵀρa2, Var(a2) = a2ᵀρa2.
		for c, out := range [2]*[3]float64{&vu, &vv} {
			a1, a2 := w[2*c][:nx*ny], w[2*c+1][:nx*ny]
			out[0] = dot(a1, f.filter(a1, nx, ny))
			c2 := f.filter(a2, nx, ny)
			out[2], out[1] = dot(a1, c2), dot(a2, c2)
		}
	}
	s := f.step
	res.U, res.V = au[0], av[0]
	res.Ux, res.Uy = au[1]/s, au[2]/s
	res.Vx, res.Vy = av[1]/s, av[2]/s
	if withStd {
		s2 := s * s
		res.VarUx, res.VarUy, res.CovUxUy = vu[0]/s2, vu[1]/s2, vu[2]/s2
		res.VarVx, res.VarVy, res.CovVxVy = vv[0]/s2, vv[1]/s2, vv[2]/s2
	}
	res.Status = GradOK
	return res
}

// invertSPD inverts the leading k×k block of the symmetric positive-definite
// matrix a into inv by Cholesky factorisation. It returns false when a pivot
// falls below a relative tolerance, that is when the window geometry does not
// determine the fit.
func invertSPD(a, inv *[6][6]float64, k int) bool {
	var l [6][6]float64
	maxDiag := 0.0
	for i := range k {
		maxDiag = max(maxDiag, a[i][i])
	}
	tol := 1e-10 * maxDiag
	for j := range k {
		s := a[j][j]
		for p := range j {
			s -= l[j][p] * l[j][p]
		}
		if !(s > tol) {
			return false
		}
		l[j][j] = math.Sqrt(s)
		for i := j + 1; i < k; i++ {
			t := a[i][j]
			for p := range j {
				t -= l[i][p] * l[j][p]
			}
			l[i][j] = t / l[j][j]
		}
	}
	// inv = L⁻ᵀ L⁻¹: solve L Lᵀ x = e_c for each column c.
	for c := range k {
		var y [6]float64
		for i := range k {
			t := 0.0
			if i == c {
				t = 1
			}
			for p := range i {
				t -= l[i][p] * y[p]
			}
			y[i] = t / l[i][i]
		}
		for i := k - 1; i >= 0; i-- {
			t := y[i]
			for p := i + 1; p < k; p++ {
				t -= l[p][i] * inv[p][c]
			}
			inv[i][c] = t / l[i][i]
		}
	}
	return true
}

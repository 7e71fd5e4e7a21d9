package stereo

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"

	"github.com/mottledic/mottle/pkg/kinematics"
)

// StrainOptions tune Strain.
type StrainOptions struct {
	// Window is the side of the strain window in grid points (odd, ≥ 3):
	// the neighbours whose 3D positions define the tangent plane and the
	// in-plane deformation gradient at a point. Default 5.
	Window int
	// MinPoints is the fewest accepted points a window needs. Default
	// 2/3 of the window.
	MinPoints int
}

// Surface is the surface deformation at one material point.
type Surface struct {
	// Normal is the unit normal of the reference tangent plane (toward the
	// left camera); E1Dir and E2Dir span the plane: E1Dir is the left
	// camera's x axis projected on it.
	Normal, E1Dir, E2Dir [3]float64
	// M are the measures of the in-plane deformation gradient F (2×2, in
	// the tangent frames of the reference and the deformed surface):
	// Green–Lagrange, Hencky, principal strains, in-plane rotation.
	M kinematics.Measures
	// W is the out-of-plane displacement: the displacement along Normal, mm.
	W float64
	// NormalRotationDeg is the angle between the reference and the
	// deformed surface normal, degrees.
	NormalRotationDeg float64
	// StdE is the predicted std of the Green–Lagrange E11, E22 and E12
	// (see Strain); NaN where the state carries no std.
	StdE [3]float64
	// N is the number of points in the window; OK whether it was computed.
	N  int
	OK bool
	// defAxes are the deformed tangent frame's axes F was taken in.
	defAxes [2][3]float64
}

// Strain computes the surface strain of a deformed state at every point
// (Luo, Chao, Sutton & Peters 1993; Sutton, Orteu & Schreier 2009, §7):
// the points of the window around it with accepted reference and deformed
// positions give the reference tangent plane (the plane of least squares
// through the reference positions, its normal the eigenvector of the
// smallest eigenvalue of their scatter), in-plane coordinates a in that
// plane, and a least-squares fit x = x₀ + F₃·a of the deformed positions:
// F₃ (3×2) maps the reference tangent plane onto the deformed one. The
// in-plane F is F₃ in the deformed tangent frame (the reference frame
// carried by the smallest rotation from the old normal to the new).
// Points with too few neighbours get OK = false.
//
// StdE propagates the displacement std of the window's points (per axis,
// State.Std) through the fit to first order (JCGM 100:2008, "Guide to the
// expression of uncertainty in measurement", 5.2): neighbours whose
// subsets share pixels have correlated errors, as the share of pixels in
// common (kinematics.SubsetCorrelation), with each point's 3×3
// displacement covariance (State.Std, State.Cov) and the frames of the fit
// held fixed.
func Strain(ref *Reference, st *State, o StrainOptions) ([]Surface, error) {
	if ref == nil || st == nil {
		return nil, errors.New("stereo strain: missing reference or state")
	}
	if len(st.Points) != len(ref.Points) {
		return nil, fmt.Errorf("stereo strain: the state has %d points, the reference %d: use a state tracked from this reference", len(st.Points), len(ref.Points))
	}
	if o.Window == 0 {
		o.Window = 5
	}
	if o.Window < 3 || o.Window%2 == 0 || o.Window > 101 {
		return nil, fmt.Errorf("stereo strain: window %d grid points: want an odd number from 3 to 101 (5 is typical)", o.Window)
	}
	if o.MinPoints == 0 {
		o.MinPoints = max(4, o.Window*o.Window*2/3)
	}
	if o.MinPoints < 4 {
		return nil, fmt.Errorf("stereo strain: min points %d: want at least 4", o.MinPoints)
	}
	g := ref.Grid
	out := make([]Surface, len(ref.Points))
	h := o.Window / 2
	var nb []int
	var ij [][2]int
	step, subset := float64(g.Step), float64(ref.Options.Correlate.Subset)
	rho := func(d int) float64 { return kinematics.SubsetCorrelation(d, step, subset) }
	for j := range g.Ny {
		for i := range g.Nx {
			k := g.Index(i, j)
			if ref.Points[k].Status != OK || st.Points[k].Status != OK {
				continue
			}
			nb, ij = nb[:0], ij[:0]
			for b := max(0, j-h); b <= min(g.Ny-1, j+h); b++ {
				for a := max(0, i-h); a <= min(g.Nx-1, i+h); a++ {
					q := g.Index(a, b)
					if ref.Points[q].Status == OK && st.Points[q].Status == OK {
						nb, ij = append(nb, q), append(ij, [2]int{a, b})
					}
				}
			}
			out[k].N = len(nb)
			if len(nb) < o.MinPoints {
				continue
			}
			surface(ref, st, k, nb, &out[k])
			if out[k].OK {
				out[k].StdE = strainStd(ref, st, k, nb, ij, &out[k], rho)
			}
		}
	}
	return out, nil
}

func surface(ref *Reference, st *State, k int, nb []int, s *Surface) {
	var c [3]float64
	for _, q := range nb {
		for d := range 3 {
			c[d] += ref.Points[q].Pos[d]
		}
	}
	for d := range 3 {
		c[d] /= float64(len(nb))
	}
	S := mat.NewSymDense(3, nil)
	for _, q := range nb {
		p := ref.Points[q].Pos
		for a := range 3 {
			for b := a; b < 3; b++ {
				S.SetSym(a, b, S.At(a, b)+(p[a]-c[a])*(p[b]-c[b]))
			}
		}
	}
	var eig mat.EigenSym
	if !eig.Factorize(S, true) {
		return
	}
	var V mat.Dense
	eig.VectorsTo(&V)
	vals := eig.Values(nil)
	if !(vals[1] > 1e-6*vals[2]) { // collinear points: no plane
		return
	}
	n := [3]float64{V.At(0, 0), V.At(1, 0), V.At(2, 0)} // smallest eigenvalue first
	if n[0]*c[0]+n[1]*c[1]+n[2]*c[2] > 0 {              // face the left camera at the origin
		n = [3]float64{-n[0], -n[1], -n[2]}
	}
	e1 := [3]float64{1 - n[0]*n[0], -n[0] * n[1], -n[0] * n[2]} // x axis minus its normal part
	e1 = unit(e1)
	e2 := cross(n, e1)
	// Fit x = x0 + F3·a over the window, a the in-plane coordinates about
	// the point itself.
	p0 := ref.Points[k].Pos
	A := mat.NewDense(len(nb), 3, nil)
	B := mat.NewDense(len(nb), 3, nil)
	for r, q := range nb {
		d := sub(ref.Points[q].Pos, p0)
		A.Set(r, 0, 1)
		A.Set(r, 1, dot(d, e1))
		A.Set(r, 2, dot(d, e2))
		for i := range 3 {
			B.Set(r, i, st.Points[q].Pos[i])
		}
	}
	var X mat.Dense
	if err := X.Solve(A, B); err != nil {
		return
	}
	f1 := [3]float64{X.At(1, 0), X.At(1, 1), X.At(1, 2)}
	f2 := [3]float64{X.At(2, 0), X.At(2, 1), X.At(2, 2)}
	nd := unit(cross(f1, f2))
	// The reference frame carried to the deformed surface by the smallest
	// rotation taking n to nd (Rodrigues).
	r1, r2 := rotateOnto(n, nd, e1), rotateOnto(n, nd, e2)
	F := kinematics.Tensor{{dot(r1, f1), dot(r1, f2)}, {dot(r2, f1), dot(r2, f2)}}
	s.Normal, s.E1Dir, s.E2Dir, s.defAxes = n, e1, e2, [2][3]float64{r1, r2}
	s.M = kinematics.Compute(F, kinematics.GreenLagrangeMeasure)
	s.W = dot(st.Points[k].Disp, n)
	s.NormalRotationDeg = math.Acos(math.Max(-1, math.Min(1, dot(n, nd)))) * 180 / math.Pi
	s.OK = s.M.Invertible
}

// strainStd returns the std of E11, E22 and E12 of the surface s at
// point k, fitted over the points nb at grid positions ij (see Strain);
// rho is the error correlation of two points d grid steps apart along one
// axis.
func strainStd(ref *Reference, st *State, k int, nb []int, ij [][2]int, s *Surface, rho func(d int) float64) [3]float64 {
	nan := [3]float64{math.NaN(), math.NaN(), math.NaN()}
	n := len(nb)
	p0 := ref.Points[k].Pos
	// G = (AᵀA)⁻¹Aᵀ of the fit's design (1, a1, a2): rows 1 and 2 give
	// the slopes F3[c][0] and F3[c][1] of each component c.
	A := mat.NewDense(n, 3, nil)
	for r, q := range nb {
		d := sub(ref.Points[q].Pos, p0)
		A.Set(r, 0, 1)
		A.Set(r, 1, dot(d, s.E1Dir))
		A.Set(r, 2, dot(d, s.E2Dir))
	}
	var N, Ni mat.Dense
	N.Mul(A.T(), A)
	if err := Ni.Inverse(&N); err != nil {
		return nan
	}
	var G mat.Dense
	G.Mul(&Ni, A.T())
	// The displacement covariance of each point projected on the deformed
	// tangent axes: P[r][a][a2] = r_aᵀ Σ_r r_a2.
	ra := s.defAxes
	P := make([][2][2]float64, n)
	for r, q := range nb {
		sp := st.Points[q]
		if !(sp.Std[0] > 0 && sp.Std[1] > 0 && sp.Std[2] > 0) {
			return nan
		}
		S := [3][3]float64{
			{sp.Std[0] * sp.Std[0], sp.Cov[0], sp.Cov[1]},
			{sp.Cov[0], sp.Std[1] * sp.Std[1], sp.Cov[2]},
			{sp.Cov[1], sp.Cov[2], sp.Std[2] * sp.Std[2]},
		}
		for a := range 2 {
			for a2 := range 2 {
				var v float64
				for x := range 3 {
					for y := range 3 {
						v += ra[a][x] * S[x][y] * ra[a2][y]
					}
				}
				P[r][a][a2] = v
			}
		}
	}
	// C over (F11, F12, F21, F22), F_ab = r_a · (column b of F3): the
	// cross-covariance of two points is ρ times the mean of their own.
	var C [4][4]float64
	for r := range n {
		for l := range n {
			w := rho(ij[r][0]-ij[l][0]) * rho(ij[r][1]-ij[l][1])
			if w == 0 {
				continue
			}
			for a := range 2 {
				for a2 := range 2 {
					pc := w * (P[r][a][a2] + P[l][a][a2]) / 2
					for b := range 2 {
						for b2 := range 2 {
							C[2*a+b][2*a2+b2] += G.At(b+1, r) * G.At(b2+1, l) * pc
						}
					}
				}
			}
		}
	}
	F := s.M.F
	J := [3][4]float64{
		{F[0][0], 0, F[1][0], 0},                             // E11 = ½(F11² + F21² − 1)
		{0, F[0][1], 0, F[1][1]},                             // E22 = ½(F12² + F22² − 1)
		{F[0][1] / 2, F[0][0] / 2, F[1][1] / 2, F[1][0] / 2}, // E12 = ½(F11F12 + F21F22)
	}
	var out [3]float64
	for e := range 3 {
		var v float64
		for x := range 4 {
			for y := range 4 {
				v += J[e][x] * C[x][y] * J[e][y]
			}
		}
		out[e] = math.Sqrt(v)
	}
	return out
}

// rotateOnto applies to v the smallest rotation taking the unit vector a
// to the unit vector b.
func rotateOnto(a, b, v [3]float64) [3]float64 {
	k := cross(a, b)
	sn := math.Sqrt(dot(k, k))
	cs := dot(a, b)
	if sn < 1e-15 {
		return v
	}
	k = [3]float64{k[0] / sn, k[1] / sn, k[2] / sn}
	kv := cross(k, v)
	kd := dot(k, v)
	var r [3]float64
	for i := range 3 {
		r[i] = v[i]*cs + kv[i]*sn + k[i]*kd*(1-cs)
	}
	return r
}

func dot(a, b [3]float64) float64 { return a[0]*b[0] + a[1]*b[1] + a[2]*b[2] }

func sub(a, b [3]float64) [3]float64 { return [3]float64{a[0] - b[0], a[1] - b[1], a[2] - b[2]} }

func unit(a [3]float64) [3]float64 {
	n := math.Sqrt(dot(a, a))
	return [3]float64{a[0] / n, a[1] / n, a[2] / n}
}

package synth

import (
	"errors"
	"fmt"
	"math"
)

// Motion is a deformation κ of the plane from reference points X to
// current points x = κ(X), with its exact inverse and gradient.
type Motion interface {
	// Map returns the current position x = κ(X) of the reference point X.
	Map(X, Y float64) (x, y float64)
	// Inverse returns the reference point X = κ⁻¹(x). It returns an error
	// wrapping ErrNoMaterial if no material point maps to x (inside a
	// hole), or ErrNoInverse if an iterative inversion failed.
	Inverse(x, y float64) (X, Y float64, err error)
	// Gradient returns the deformation gradient F[i][j] = ∂x_i/∂X_j at X.
	Gradient(X, Y float64) [2][2]float64
	// Spec returns the kind and parameters of the motion; NewMotion(Spec())
	// rebuilds an equal motion.
	Spec() Spec
}

// Body is implemented by motions whose body does not fill the plane.
type Body interface {
	// Material reports whether the reference point X is material.
	Material(X, Y float64) bool
}

// Scaler is implemented by motions that can be scaled by a load factor:
// Scale(0) is the identity, Scale(1) the motion itself, and in between the
// motion grows as the physics of the motion suggests (linearly for
// displacements, by angle for rotations, by stress for elastic fields).
type Scaler interface {
	Scale(s float64) Motion
}

// Errors returned by motions.
var (
	// ErrNoMaterial: the current point is not the image of any material
	// point (it lies inside a hole).
	ErrNoMaterial = errors.New("no material at this point")
	// ErrNoInverse: Newton iteration for κ⁻¹ did not converge.
	ErrNoInverse = errors.New("motion inverse did not converge")
	// ErrMotion: the motion parameters are invalid.
	ErrMotion = errors.New("invalid motion")
)

// Newton settings for κ⁻¹: iteration stops when |κ(X) − x| < newtonTol px;
// after newtonMaxIter iterations a result with |κ(X) − x| < newtonAccept px
// is still accepted (well inside the promised 1e-6 px).
const (
	newtonTol     = 1e-11
	newtonAccept  = 1e-8
	newtonMaxIter = 60
)

// mapGradienter is implemented by motions whose inverse is found by
// newton: κ(X) and F(X) together, sharing work.
type mapGradienter interface {
	mapGrad(X, Y float64) (x, y float64, F [2][2]float64)
}

// newton solves κ(X) = x for X from the starting guess (X, Y), with
// step halving when a full step increases the residual.
//
// It is generic so that calling it on a motion value does not allocate.
func newton[M mapGradienter](m M, x, y, X, Y float64) (float64, float64, error) {
	mx, my, F := m.mapGrad(X, Y)
	rx, ry := mx-x, my-y
	res2 := rx*rx + ry*ry
	for it := 0; it < newtonMaxIter; it++ {
		if res2 < newtonTol*newtonTol {
			return X, Y, nil
		}
		det := F[0][0]*F[1][1] - F[0][1]*F[1][0]
		if !(det > 0) {
			return X, Y, fmt.Errorf("%w at x = (%g, %g): det F = %g at X = (%g, %g)", ErrNoInverse, x, y, det, X, Y)
		}
		dX := (F[1][1]*rx - F[0][1]*ry) / det
		dY := (-F[1][0]*rx + F[0][0]*ry) / det
		for t := 1.0; ; t /= 2 {
			nX, nY := X-t*dX, Y-t*dY
			nmx, nmy, nF := m.mapGrad(nX, nY)
			nrx, nry := nmx-x, nmy-y
			nres2 := nrx*nrx + nry*nry
			if nres2 < res2 || t < 1e-3 {
				X, Y, rx, ry, res2, F = nX, nY, nrx, nry, nres2, nF
				break
			}
		}
	}
	if res2 < newtonAccept*newtonAccept {
		return X, Y, nil
	}
	return X, Y, fmt.Errorf("%w at x = (%g, %g): residual %.3g px after %d iterations", ErrNoInverse, x, y, math.Sqrt(res2), newtonMaxIter)
}

// Identity is the motion that does nothing.
type Identity struct{}

// Map returns X unchanged.
func (Identity) Map(X, Y float64) (float64, float64) { return X, Y }

// Inverse returns x unchanged.
func (Identity) Inverse(x, y float64) (float64, float64, error) { return x, y, nil }

// Gradient returns the identity tensor.
func (Identity) Gradient(X, Y float64) [2][2]float64 { return [2][2]float64{{1, 0}, {0, 1}} }

// Spec returns kind "identity".
func (Identity) Spec() Spec { return Spec{Kind: "identity", Params: map[string]float64{}} }

// Scale returns the identity.
func (Identity) Scale(float64) Motion { return Identity{} }

// Translation is a rigid translation by (U, V) px.
type Translation struct {
	U, V float64
}

// Map returns X + (U, V).
func (t Translation) Map(X, Y float64) (float64, float64) { return X + t.U, Y + t.V }

// Inverse returns x − (U, V).
func (t Translation) Inverse(x, y float64) (float64, float64, error) { return x - t.U, y - t.V, nil }

// Gradient returns the identity tensor.
func (Translation) Gradient(X, Y float64) [2][2]float64 { return [2][2]float64{{1, 0}, {0, 1}} }

// Spec returns kind "translation" with u, v.
func (t Translation) Spec() Spec {
	return Spec{Kind: "translation", Params: map[string]float64{"u": t.U, "v": t.V}}
}

// Scale returns the translation by s·(U, V).
func (t Translation) Scale(s float64) Motion { return Translation{s * t.U, s * t.V} }

// Affine is the homogeneous deformation x = C + F·(X − C) + (U, V) about
// the centre C = (CX, CY). F must have a positive determinant.
type Affine struct {
	F      [2][2]float64
	CX, CY float64
	U, V   float64
}

// Validate reports whether det F > 0 and every entry is finite.
func (a Affine) Validate() error {
	d := a.F[0][0]*a.F[1][1] - a.F[0][1]*a.F[1][0]
	if !(d > 0) || math.IsInf(d, 0) {
		return fmt.Errorf("%w: affine F = %v has det F = %g; use a matrix with det F > 0 (no reflection or collapse)", ErrMotion, a.F, d)
	}
	for _, v := range []float64{a.CX, a.CY, a.U, a.V} {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("%w: affine centre or translation %v is not finite", ErrMotion, []float64{a.CX, a.CY, a.U, a.V})
		}
	}
	return nil
}

// Map returns C + F·(X − C) + (U, V).
func (a Affine) Map(X, Y float64) (float64, float64) {
	dx, dy := X-a.CX, Y-a.CY
	return a.CX + a.F[0][0]*dx + a.F[0][1]*dy + a.U, a.CY + a.F[1][0]*dx + a.F[1][1]*dy + a.V
}

// Inverse returns C + F⁻¹·(x − C − (U, V)) in closed form.
func (a Affine) Inverse(x, y float64) (float64, float64, error) {
	d := a.F[0][0]*a.F[1][1] - a.F[0][1]*a.F[1][0]
	if !(d > 0) {
		return 0, 0, fmt.Errorf("%w: det F = %g", ErrNoInverse, d)
	}
	dx, dy := x-a.CX-a.U, y-a.CY-a.V
	return a.CX + (a.F[1][1]*dx-a.F[0][1]*dy)/d, a.CY + (-a.F[1][0]*dx+a.F[0][0]*dy)/d, nil
}

// Gradient returns F.
func (a Affine) Gradient(X, Y float64) [2][2]float64 { return a.F }

// Spec returns kind "affine" with F11, F12, F21, F22, cx, cy, u, v.
func (a Affine) Spec() Spec {
	return Spec{Kind: "affine", Params: map[string]float64{
		"F11": a.F[0][0], "F12": a.F[0][1], "F21": a.F[1][0], "F22": a.F[1][1],
		"cx": a.CX, "cy": a.CY, "u": a.U, "v": a.V}}
}

// Scale returns the affine motion with F = I + s(F − I) and translation
// s·(U, V). For a scaled rotation use Rotation, which scales the angle.
func (a Affine) Scale(s float64) Motion {
	b := a
	b.F[0][0] = 1 + s*(a.F[0][0]-1)
	b.F[0][1] = s * a.F[0][1]
	b.F[1][0] = s * a.F[1][0]
	b.F[1][1] = 1 + s*(a.F[1][1]-1)
	b.U, b.V = s*a.U, s*a.V
	return b
}

// Rotation is a rigid rotation by Angle degrees about (CX, CY), followed
// by a translation (U, V). A positive angle turns +x toward +y, which is
// clockwise on screen (image y points down), matching the project's
// rotation sign θ = atan2(F21 − F12, F11 + F22).
type Rotation struct {
	Angle  float64 // degrees
	CX, CY float64
	U, V   float64
}

func (r Rotation) affine() Affine {
	s, c := math.Sincos(r.Angle * math.Pi / 180)
	return Affine{F: [2][2]float64{{c, -s}, {s, c}}, CX: r.CX, CY: r.CY, U: r.U, V: r.V}
}

// Map rotates X about the centre and translates it.
func (r Rotation) Map(X, Y float64) (float64, float64) { return r.affine().Map(X, Y) }

// Inverse undoes Map in closed form.
func (r Rotation) Inverse(x, y float64) (float64, float64, error) { return r.affine().Inverse(x, y) }

// Gradient returns the rotation tensor R.
func (r Rotation) Gradient(X, Y float64) [2][2]float64 { return r.affine().F }

// Spec returns kind "rotation" with angle_deg, cx, cy, u, v.
func (r Rotation) Spec() Spec {
	return Spec{Kind: "rotation", Params: map[string]float64{"angle_deg": r.Angle, "cx": r.CX, "cy": r.CY, "u": r.U, "v": r.V}}
}

// Scale returns the rotation by s·Angle with translation s·(U, V).
func (r Rotation) Scale(s float64) Motion {
	return Rotation{Angle: s * r.Angle, CX: r.CX, CY: r.CY, U: s * r.U, V: s * r.V}
}

// Quadratic is a second-order displacement field about (CX, CY). With
// dX = X − CX, dY = Y − CY and P indexed like correlate.Point.P
// (u, ux, uy, v, vx, vy, uxx, uxy, uyy, vxx, vxy, vyy):
//
//	u = P0 + P1 dX + P2 dY + ½P6 dX² + P7 dX dY + ½P8 dY²
//	v = P3 + P4 dX + P5 dY + ½P9 dX² + P10 dX dY + ½P11 dY²
//
// Its inverse is found by Newton iteration.
type Quadratic struct {
	P      [12]float64
	CX, CY float64
}

// quadNames are the Spec names of Quadratic.P, in order.
var quadNames = [12]string{"u", "ux", "uy", "v", "vx", "vy", "uxx", "uxy", "uyy", "vxx", "vxy", "vyy"}

// Displacement returns (u, v) at X.
func (q Quadratic) Displacement(X, Y float64) (u, v float64) {
	dx, dy := X-q.CX, Y-q.CY
	p := &q.P
	u = p[0] + p[1]*dx + p[2]*dy + 0.5*p[6]*dx*dx + p[7]*dx*dy + 0.5*p[8]*dy*dy
	v = p[3] + p[4]*dx + p[5]*dy + 0.5*p[9]*dx*dx + p[10]*dx*dy + 0.5*p[11]*dy*dy
	return u, v
}

// Map returns X + u(X).
func (q Quadratic) Map(X, Y float64) (float64, float64) {
	u, v := q.Displacement(X, Y)
	return X + u, Y + v
}

// Inverse solves X + u(X) = x by Newton iteration.
func (q Quadratic) Inverse(x, y float64) (float64, float64, error) {
	u, v := q.Displacement(x, y)
	return newton(q, x, y, x-u, y-v)
}

// Gradient returns I + ∂u/∂X.
func (q Quadratic) Gradient(X, Y float64) [2][2]float64 {
	dx, dy := X-q.CX, Y-q.CY
	p := &q.P
	return [2][2]float64{
		{1 + p[1] + p[6]*dx + p[7]*dy, p[2] + p[7]*dx + p[8]*dy},
		{p[4] + p[9]*dx + p[10]*dy, 1 + p[5] + p[10]*dx + p[11]*dy},
	}
}

// Spec returns kind "quadratic" with u, ux, …, vyy, cx, cy.
func (q Quadratic) Spec() Spec {
	m := map[string]float64{"cx": q.CX, "cy": q.CY}
	for i, n := range quadNames {
		m[n] = q.P[i]
	}
	return Spec{Kind: "quadratic", Params: m}
}

// Scale multiplies every coefficient by s.
func (q Quadratic) Scale(s float64) Motion {
	r := q
	for i := range r.P {
		r.P[i] *= s
	}
	return r
}

// Star is the vertical sinusoidal displacement of the DIC Challenge 2.0
// "star" images (Reu et al. 2022, "DIC Challenge 2.0", Exp. Mech. 62:639;
// form and numbers from memory):
//
//	u = 0,  v = A·cos(2π(Y − Y0)/p(X)),
//
// with amplitude A (0.5 px in the challenge) and a period p that grows
// along x from PeriodMin at X ≤ X0 to PeriodMax at X ≥ X1, linearly in X,
// or geometrically (p = PeriodMin·(PeriodMax/PeriodMin)^t) when Geometric
// is set. v peaks along the line Y = Y0. The inverse keeps X = x and solves
// Y + v(x, Y) = y by safeguarded Newton iteration; it needs
// 2πA/PeriodMin < 1 so the map stays one-to-one (Validate checks < 0.9).
type Star struct {
	Amplitude            float64
	PeriodMin, PeriodMax float64
	X0, X1               float64
	Y0                   float64
	Geometric            bool
}

// Validate checks the parameters.
func (s Star) Validate() error {
	var errs []error
	if !(s.PeriodMin > 0) || !(s.PeriodMax >= s.PeriodMin) || math.IsInf(s.PeriodMax, 0) {
		errs = append(errs, fmt.Errorf("%w: star periods %g–%g px: need 0 < period_min ≤ period_max", ErrMotion, s.PeriodMin, s.PeriodMax))
	} else if k := 2 * math.Pi * math.Abs(s.Amplitude) / s.PeriodMin; !(k < 0.9) {
		errs = append(errs, fmt.Errorf("%w: star amplitude %g px with minimum period %g px gives |∂v/∂Y| up to %.3g; keep 2π·A/period_min below 0.9",
			ErrMotion, s.Amplitude, s.PeriodMin, k))
	}
	if !(s.X1 > s.X0) {
		errs = append(errs, fmt.Errorf("%w: star x range %g–%g: need x1 > x0", ErrMotion, s.X0, s.X1))
	}
	if math.IsNaN(s.Y0) || math.IsInf(s.Y0, 0) {
		errs = append(errs, fmt.Errorf("%w: star y0 %g is not finite", ErrMotion, s.Y0))
	}
	return errors.Join(errs...)
}

// Period returns p(X) and dp/dX.
func (s Star) Period(X float64) (p, dp float64) {
	t := (X - s.X0) / (s.X1 - s.X0)
	inside := t > 0 && t < 1
	t = math.Max(0, math.Min(1, t))
	if s.Geometric {
		ratio := s.PeriodMax / s.PeriodMin
		p = s.PeriodMin * math.Pow(ratio, t)
		if inside {
			dp = p * math.Log(ratio) / (s.X1 - s.X0)
		}
		return p, dp
	}
	p = s.PeriodMin + (s.PeriodMax-s.PeriodMin)*t
	if inside {
		dp = (s.PeriodMax - s.PeriodMin) / (s.X1 - s.X0)
	}
	return p, dp
}

// V returns the vertical displacement v(X, Y).
func (s Star) V(X, Y float64) float64 {
	p, _ := s.Period(X)
	return s.Amplitude * math.Cos(2*math.Pi*(Y-s.Y0)/p)
}

// Map returns (X, Y + v(X, Y)).
func (s Star) Map(X, Y float64) (float64, float64) { return X, Y + s.V(X, Y) }

// Inverse returns (x, Y) with Y + v(x, Y) = y, by Halley iteration
// (cubically convergent) safeguarded by bisection on the bracket
// [y − |A|, y + |A|], which holds the root because |v| ≤ |A|.
func (s Star) Inverse(x, y float64) (float64, float64, error) {
	p, _ := s.Period(x)
	k := 2 * math.Pi / p
	a := math.Abs(s.Amplitude)
	lo, hi := y-a, y+a
	Y := y - s.Amplitude*math.Cos(k*(y-s.Y0))
	for it := 0; it < newtonMaxIter; it++ {
		sn, cs := math.Sincos(k * (Y - s.Y0))
		g := Y + s.Amplitude*cs - y
		if math.Abs(g) < newtonTol {
			return x, Y, nil
		}
		if g > 0 {
			hi = math.Min(hi, Y)
		} else {
			lo = math.Max(lo, Y)
		}
		d1 := 1 - s.Amplitude*k*sn
		d2 := -s.Amplitude * k * k * cs
		n := Y - 2*g*d1/(2*d1*d1-g*d2)
		if !(n > lo && n < hi) {
			n = (lo + hi) / 2
		}
		Y = n
	}
	if _, yy := s.Map(x, Y); math.Abs(yy-y) < newtonAccept {
		return x, Y, nil
	}
	return x, Y, fmt.Errorf("%w at x = (%g, %g)", ErrNoInverse, x, y)
}

// Gradient returns F = [[1, 0], [∂v/∂X, 1 + ∂v/∂Y]].
func (s Star) Gradient(X, Y float64) [2][2]float64 {
	p, dp := s.Period(X)
	phi := 2 * math.Pi * (Y - s.Y0) / p
	sn := math.Sin(phi)
	vY := -s.Amplitude * sn * 2 * math.Pi / p
	vX := s.Amplitude * sn * phi * dp / p
	return [2][2]float64{{1, 0}, {vX, 1 + vY}}
}

// Spec returns kind "star" with amplitude, period_min, period_max, x0, x1,
// y0 and geometric (0 or 1).
func (s Star) Spec() Spec {
	g := 0.0
	if s.Geometric {
		g = 1
	}
	return Spec{Kind: "star", Params: map[string]float64{"amplitude": s.Amplitude, "period_min": s.PeriodMin,
		"period_max": s.PeriodMax, "x0": s.X0, "x1": s.X1, "y0": s.Y0, "geometric": g}}
}

// Scale returns the star with amplitude s·A.
func (s Star) Scale(f float64) Motion {
	r := s
	r.Amplitude *= f
	return r
}

func (q Quadratic) inverseFrom(x, y, X0, Y0 float64) (float64, float64, error) {
	return newton(q, x, y, X0, Y0)
}

func (q Quadratic) mapGrad(X, Y float64) (float64, float64, [2][2]float64) {
	x, y := q.Map(X, Y)
	return x, y, q.Gradient(X, Y)
}

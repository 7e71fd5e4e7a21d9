package calib

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strings"

	"gonum.org/v1/gonum/mat"
)

// View is one calibration image: its name (for messages) and the target
// points found in it.
type View struct {
	Name   string
	Points []Observation
}

// Options tune Calibrate. The zero value estimates all nine camera
// parameters.
type Options struct {
	// FixK3 holds k3 at zero (for lenses with little distortion, where k3
	// is poorly determined).
	FixK3 bool
	// FixTangential holds p1 and p2 at zero.
	FixTangential bool
	// MaxIter bounds the Levenberg–Marquardt iterations. Default 200.
	MaxIter int
	// OutlierFactor flags a view whose RMS exceeds this multiple of the
	// median view RMS. Default 3.
	OutlierFactor float64
}

// minViews is the fewest views Calibrate accepts.
const minViews = 3

// Residual is the reprojection error at one target point of one view.
type Residual struct {
	I  int     `json:"i"`
	J  int     `json:"j"`
	X  float64 `json:"x_px"`
	Y  float64 `json:"y_px"`
	DX float64 `json:"dx_px"`
	DY float64 `json:"dy_px"`
}

// ViewResult is the fit at one view.
type ViewResult struct {
	Name string `json:"image"`
	Pose Pose   `json:"pose"`
	// RMS is the root mean square of the reprojection error lengths, px;
	// Max the largest length.
	RMS float64 `json:"rms_px"`
	Max float64 `json:"max_px"`
	N   int     `json:"points"`
	// Outlier marks a view whose RMS stands out (see Options.OutlierFactor).
	Outlier   bool       `json:"outlier"`
	Residuals []Residual `json:"residuals"`
}

// Result is a calibration.
type Result struct {
	Camera Camera
	// Std are the standard deviations of the camera parameters in the
	// order of ParamNames, from the Jacobian at the solution:
	// Cov = s²(JᵀJ)⁻¹ with s² the residual sum of squares over the degrees
	// of freedom. Fixed parameters have 0.
	Std [nIntr]float64
	// Cov is the covariance of the camera parameters (same order), px and
	// unitless; rows and columns of fixed parameters are 0.
	Cov [nIntr][nIntr]float64
	// RMS is the root mean square reprojection error length over all
	// points, px.
	RMS float64
	// Sigma is s, the standard deviation of one residual coordinate, px.
	Sigma      float64
	Views      []ViewResult
	W, H       int
	Points     int
	Iterations int
	// CircleBiasCorrected is set when dot centres were corrected for the
	// perspective bias of circle centroids (Heikkilä & Silvén 1997).
	CircleBiasCorrected bool
}

// Calibrate fits the camera to views of a flat target seen by a w×h camera:
// Zhang's closed form, then Levenberg–Marquardt over all parameters and
// poses. Dot centroids are corrected for the perspective bias of a circle's
// image (Heikkilä & Silvén 1997, "A four-step camera calibration procedure
// with implicit image correction", CVPR): the centroid of the projected dot
// is computed from the current fit and the difference to the projected
// centre removed, three times. The fit is deterministic.
func Calibrate(ctx context.Context, views []View, w, h int, o Options) (*Result, error) {
	if o.MaxIter == 0 {
		o.MaxIter = 200
	}
	if o.OutlierFactor == 0 {
		o.OutlierFactor = 3
	}
	if w <= 0 || h <= 0 {
		return nil, fmt.Errorf("calibrate: image size %d×%d px: use the size of the calibration images", w, h)
	}
	var names []string
	for _, v := range views {
		if len(v.Points) < 6 {
			return nil, fmt.Errorf("calibrate: view %q has %d points; each view needs at least 6", v.Name, len(v.Points))
		}
		names = append(names, v.Name)
	}
	if len(views) < minViews {
		return nil, fmt.Errorf("calibrate: %d usable view(s) (%s); at least %d are needed and 10–20 recommended, with the target tilted 10–40° in different directions",
			len(views), strings.Join(names, ", "), minViews)
	}
	var hs [][3][3]float64
	for _, v := range views {
		src := make([][2]float64, len(v.Points))
		dst := make([][2]float64, len(v.Points))
		for k, p := range v.Points {
			src[k] = [2]float64{p.X, p.Y}
			dst[k] = [2]float64{p.Px, p.Py}
		}
		H, err := homography(src, dst)
		if err != nil {
			return nil, fmt.Errorf("calibrate: view %q: %w", v.Name, err)
		}
		hs = append(hs, H)
	}
	fx, fy, cx, cy, err := zhangIntrinsics(hs)
	if err != nil {
		return nil, fmt.Errorf("calibrate: %w", err)
	}
	p := make([]float64, nIntr+6*len(views))
	copy(p, []float64{fx, fy, cx, cy})
	for k, H := range hs {
		ps := zhangPose(H, fx, fy, cx, cy)
		copy(p[nIntr+6*k:], ps.Rot[:])
		copy(p[nIntr+6*k+3:], ps.T[:])
	}
	free := make([]bool, len(p))
	for i := range free {
		free[i] = true
	}
	if o.FixTangential {
		free[6], free[7] = false, false
	}
	if o.FixK3 {
		free[8] = false
	}
	// Observations, possibly corrected for circle bias.
	obs := make([][]Observation, len(views))
	dots := false
	for k, v := range views {
		obs[k] = append([]Observation(nil), v.Points...)
		for _, q := range v.Points {
			if q.R > 0 {
				dots = true
			}
		}
	}
	f := &fitter{obs: obs, free: free}
	iters, err := f.lm(ctx, p, o.MaxIter)
	if err != nil {
		return nil, err
	}
	if dots {
		for range 3 {
			cam := cameraFrom(p[:nIntr])
			for k, v := range views {
				ps := poseAt(p, k)
				for n, q := range v.Points {
					if q.R <= 0 {
						continue
					}
					bx, by := circleBias(cam, ps, q.X, q.Y, q.R)
					obs[k][n].Px, obs[k][n].Py = q.Px-bx, q.Py-by
				}
			}
			it, err := f.lm(ctx, p, o.MaxIter)
			if err != nil {
				return nil, err
			}
			iters += it
		}
	}
	return f.result(p, views, w, h, iters, dots, o)
}

func poseAt(p []float64, k int) Pose {
	var ps Pose
	copy(ps.Rot[:], p[nIntr+6*k:])
	copy(ps.T[:], p[nIntr+6*k+3:])
	return ps
}

// circleBias returns the difference between the centroid of the image of a
// disc of radius r centred at (X, Y) on the plane and the image of its
// centre: the image outline is traced through the full model at 128
// points and its area centroid taken.
func circleBias(c Camera, ps Pose, X, Y, r float64) (float64, float64) {
	R := ps.Matrix()
	const n = 128
	var xs, ys [n]float64
	for k := range n {
		a := 2 * math.Pi * float64(k) / n
		q := applyRT(&R, ps.T, X+r*math.Cos(a), Y+r*math.Sin(a))
		x, y, ok := c.Project(q)
		if !ok {
			return 0, 0
		}
		xs[k], ys[k] = x, y
	}
	var A, cx, cy float64
	for k := range n {
		j := (k + 1) % n
		cr := xs[k]*ys[j] - xs[j]*ys[k]
		A += cr
		cx += (xs[k] + xs[j]) * cr
		cy += (ys[k] + ys[j]) * cr
	}
	if A == 0 {
		return 0, 0
	}
	cx /= 3 * A
	cy /= 3 * A
	x0, y0, ok := c.Project(applyRT(&R, ps.T, X, Y))
	if !ok {
		return 0, 0
	}
	return cx - x0, cy - y0
}

// fitter holds the observations of a bundle adjustment.
type fitter struct {
	obs  [][]Observation
	free []bool
}

// residuals writes the reprojection residuals (model − observed) of view k
// for parameters p into r (2 per point).
func (f *fitter) residualsView(p []float64, k int, r []float64) {
	cam := cameraFrom(p[:nIntr])
	ps := poseAt(p, k)
	R := ps.Matrix()
	for n, q := range f.obs[k] {
		x, y, ok := cam.Project(applyRT(&R, ps.T, q.X, q.Y))
		if !ok {
			x, y = q.Px+1e6, q.Py+1e6
		}
		r[2*n] = x - q.Px
		r[2*n+1] = y - q.Py
	}
}

func (f *fitter) rows() (int, []int) {
	off := make([]int, len(f.obs)+1)
	for k, o := range f.obs {
		off[k+1] = off[k] + 2*len(o)
	}
	return off[len(f.obs)], off
}

func (f *fitter) residuals(p []float64) []float64 {
	m, off := f.rows()
	r := make([]float64, m)
	for k := range f.obs {
		f.residualsView(p, k, r[off[k]:off[k+1]])
	}
	return r
}

// jacobian returns the m×n Jacobian of the residuals by central
// differences; a view's pose moves only that view's rows.
func (f *fitter) jacobian(p []float64) *mat.Dense {
	m, off := f.rows()
	n := len(p)
	J := mat.NewDense(m, n, nil)
	q := append([]float64(nil), p...)
	rp := make([]float64, m)
	rm := make([]float64, m)
	for j := range n {
		if !f.free[j] {
			continue
		}
		step := 1e-6 * math.Max(math.Abs(p[j]), 1)
		if j >= 2 && j < nIntr { // principal point and distortion
			step = 1e-6 * math.Max(math.Abs(p[j]), 0.1)
		}
		views := []int{}
		if j < nIntr {
			for k := range f.obs {
				views = append(views, k)
			}
		} else {
			views = append(views, (j-nIntr)/6)
		}
		for _, k := range views {
			q[j] = p[j] + step
			f.residualsView(q, k, rp[off[k]:off[k+1]])
			q[j] = p[j] - step
			f.residualsView(q, k, rm[off[k]:off[k+1]])
			q[j] = p[j]
			for i := off[k]; i < off[k+1]; i++ {
				J.Set(i, j, (rp[i]-rm[i])/(2*step))
			}
		}
	}
	return J
}

func sumSq(r []float64) float64 {
	var s float64
	for _, v := range r {
		s += v * v
	}
	return s
}

// lm minimises the residual sum of squares over the free parameters of p
// by Levenberg–Marquardt with Marquardt's diagonal scaling (Moré 1978). p
// is updated in place; the number of iterations is returned.
func (f *fitter) lm(ctx context.Context, p []float64, maxIter int) (int, error) {
	n := len(p)
	cost := sumSq(f.residuals(p))
	lambda := 1e-3
	trial := make([]float64, n)
	it := 0
	for ; it < maxIter; it++ {
		if err := ctx.Err(); err != nil {
			return it, fmt.Errorf("calibrate: %w", err)
		}
		J := f.jacobian(p)
		r := f.residuals(p)
		var A mat.SymDense
		A.SymOuterK(1, J.T())
		g := mat.NewVecDense(n, nil)
		g.MulVec(J.T(), mat.NewVecDense(len(r), r))
		improved := false
		for range 30 {
			M := mat.NewSymDense(n, nil)
			M.CopySym(&A)
			for j := range n {
				if !f.free[j] {
					for i := range n {
						M.SetSym(i, j, 0)
					}
					M.SetSym(j, j, 1)
					continue
				}
				d := A.At(j, j)
				M.SetSym(j, j, d+lambda*math.Max(d, 1e-12))
			}
			rhs := mat.NewVecDense(n, nil)
			for j := range n {
				if f.free[j] {
					rhs.SetVec(j, -g.AtVec(j))
				}
			}
			var ch mat.Cholesky
			if !ch.Factorize(M) {
				lambda *= 10
				continue
			}
			var delta mat.VecDense
			if err := ch.SolveVecTo(&delta, rhs); err != nil {
				lambda *= 10
				continue
			}
			for j := range n {
				trial[j] = p[j] + delta.AtVec(j)
			}
			c := sumSq(f.residuals(trial))
			if c < cost {
				rel := (cost - c) / math.Max(cost, 1e-300)
				copy(p, trial)
				cost = c
				lambda = math.Max(lambda/10, 1e-15)
				improved = true
				var dn, pn float64
				for j := range n {
					dn += delta.AtVec(j) * delta.AtVec(j)
					pn += p[j] * p[j]
				}
				if rel < 1e-14 || math.Sqrt(dn) < 1e-13*math.Sqrt(pn) {
					return it + 1, nil
				}
				break
			}
			lambda *= 10
			if lambda > 1e16 {
				break
			}
		}
		if !improved {
			return it + 1, nil // no step lowers the cost: at the minimum
		}
	}
	return it, nil
}

// result assembles the Result at the solution p.
func (f *fitter) result(p []float64, views []View, w, h, iters int, dots bool, o Options) (*Result, error) {
	cam := cameraFrom(p[:nIntr])
	if err := cam.Validate(); err != nil {
		return nil, fmt.Errorf("calibrate: the fit diverged: %w", err)
	}
	r := f.residuals(p)
	m := len(r)
	nfree := 0
	for _, fr := range f.free {
		if fr {
			nfree++
		}
	}
	if m <= nfree {
		return nil, fmt.Errorf("calibrate: %d residuals for %d parameters; use more views or more points", m, nfree)
	}
	res := &Result{Camera: cam, W: w, H: h, Iterations: iters, CircleBiasCorrected: dots}
	ssr := sumSq(r)
	res.Sigma = math.Sqrt(ssr / float64(m-nfree))
	// Covariance of the free parameters.
	J := f.jacobian(p)
	var idx []int
	for j, fr := range f.free {
		if fr {
			idx = append(idx, j)
		}
	}
	A := mat.NewSymDense(len(idx), nil)
	for a, ja := range idx {
		for b := a; b < len(idx); b++ {
			jb := idx[b]
			var s float64
			for i := range m {
				s += J.At(i, ja) * J.At(i, jb)
			}
			A.SetSym(a, b, s)
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(A) {
		return nil, errors.New("calibrate: the parameters are not all determined by these views (JᵀJ is singular); tilt the target in more directions, or fix k3 or the tangential terms")
	}
	var cov mat.SymDense
	if err := ch.InverseTo(&cov); err != nil {
		return nil, fmt.Errorf("calibrate: covariance: %w", err)
	}
	s2 := res.Sigma * res.Sigma
	for a, j := range idx {
		if j >= nIntr {
			continue
		}
		res.Std[j] = res.Sigma * math.Sqrt(cov.At(a, a))
		for b, k := range idx {
			if k < nIntr {
				res.Cov[j][k] = s2 * cov.At(a, b)
			}
		}
	}
	_, off := f.rows()
	var all float64
	var rms []float64
	for k, v := range views {
		vr := ViewResult{Name: v.Name, Pose: poseAt(p, k), N: len(v.Points)}
		var s float64
		for n, q := range v.Points {
			dx, dy := r[off[k]+2*n], r[off[k]+2*n+1]
			l2 := dx*dx + dy*dy
			s += l2
			vr.Max = math.Max(vr.Max, math.Sqrt(l2))
			vr.Residuals = append(vr.Residuals, Residual{I: q.I, J: q.J, X: q.Px, Y: q.Py, DX: dx, DY: dy})
		}
		all += s
		res.Points += len(v.Points)
		vr.RMS = math.Sqrt(s / float64(len(v.Points)))
		rms = append(rms, vr.RMS)
		res.Views = append(res.Views, vr)
	}
	res.RMS = math.Sqrt(all / float64(res.Points))
	med := median(rms)
	for k := range res.Views {
		res.Views[k].Outlier = res.Views[k].RMS > o.OutlierFactor*med
	}
	return res, nil
}

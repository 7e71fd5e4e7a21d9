package calib

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strings"
	"time"

	"gonum.org/v1/gonum/mat"
)

// StereoView is one simultaneous pair of calibration images: the target
// points found in the left and in the right image.
type StereoView struct {
	Name        string
	Left, Right []Observation
}

// Rig is a calibrated pair of cameras: a point p in the left camera's frame
// is at R·p + T in the right camera's frame. Both cameras take images of
// W×H px.
type Rig struct {
	Left, Right Camera
	R           [3][3]float64
	T           [3]float64
	W, H        int
}

// Baseline returns the distance between the two camera centres, in the
// unit of T (mm).
func (r *Rig) Baseline() float64 { return math.Sqrt(r.T[0]*r.T[0] + r.T[1]*r.T[1] + r.T[2]*r.T[2]) }

// Angle returns the angle between the two optical axes, degrees.
func (r *Rig) Angle() float64 {
	return math.Acos(math.Max(-1, math.Min(1, r.R[2][2]))) * 180 / math.Pi
}

// Validate reports a rig with an invalid camera, a rotation that is not a
// rotation, a zero baseline or no image size.
func (r *Rig) Validate() error {
	var errs []error
	if err := r.Left.Validate(); err != nil {
		errs = append(errs, fmt.Errorf("left %w", err))
	}
	if err := r.Right.Validate(); err != nil {
		errs = append(errs, fmt.Errorf("right %w", err))
	}
	d := det3(r.R)
	if !(math.Abs(d-1) < 1e-6) {
		errs = append(errs, fmt.Errorf("rig rotation has determinant %g: want a rotation (1)", d))
	}
	if !(r.Baseline() > 0) || math.IsNaN(r.Baseline()) || math.IsInf(r.Baseline(), 0) {
		errs = append(errs, fmt.Errorf("rig translation %v mm: want a finite, non-zero baseline", r.T))
	}
	if r.W <= 0 || r.H <= 0 {
		errs = append(errs, fmt.Errorf("rig image size %d×%d px: want the size of the calibration images", r.W, r.H))
	}
	return errors.Join(errs...)
}

// Check returns an error if left and right images of the given sizes
// cannot be used with the rig: they differ from each other or from the
// calibration size.
func (r *Rig) Check(lw, lh, rw, rh int) error {
	if lw != rw || lh != rh {
		return fmt.Errorf("the left image is %d×%d px but the right is %d×%d px: a stereo pair needs two images of the same size, the size of the rig calibration (%d×%d px)",
			lw, lh, rw, rh, r.W, r.H)
	}
	if lw != r.W || lh != r.H {
		return fmt.Errorf("the images are %d×%d px but the rig was calibrated on %d×%d px images: use images of the calibration size, or calibrate the rig at this size",
			lw, lh, r.W, r.H)
	}
	return nil
}

// nRig is the number of rig parameters: two cameras and the relative pose.
const nRig = 2*nIntr + 6

// RigParamNames returns the names of the rig parameters in the order of
// StereoResult.Std: the left camera's (ParamNames, prefixed "left."), the
// right camera's ("right."), then the rotation vector rx, ry, rz (rad) and
// the translation tx, ty, tz (mm) of the right camera relative to the left.
func RigParamNames() [nRig]string {
	var n [nRig]string
	for i, s := range ParamNames() {
		n[i] = "left." + s
		n[nIntr+i] = "right." + s
	}
	copy(n[2*nIntr:], []string{"rx", "ry", "rz", "tx", "ty", "tz"})
	return n
}

// StereoViewResult is the fit at one image pair.
type StereoViewResult struct {
	Name string `json:"image"`
	// Pose is the target's pose in the left camera's frame.
	Pose     Pose    `json:"pose"`
	RMSLeft  float64 `json:"rms_left_px"`
	RMSRight float64 `json:"rms_right_px"`
	Points   [2]int  `json:"points"`
}

// StereoResult is a rig calibration.
type StereoResult struct {
	Rig Rig
	// Rot is R as a rotation vector (rad).
	Rot [3]float64
	// Std are the standard deviations of the rig parameters in the order of
	// RigParamNames, Cov = s²(JᵀJ)⁻¹ as for Result; 0 for fixed parameters.
	Std [nRig]float64
	// RMSLeft, RMSRight and RMS are the RMS reprojection error lengths in
	// the left images, the right images and all, px; Sigma the std of one
	// residual coordinate.
	RMSLeft, RMSRight, RMS, Sigma float64
	Views                         []StereoViewResult
	Iterations                    int
}

// CalibrateStereo fits a stereo rig to simultaneous views of a flat target
// seen by two w×h cameras: each camera is calibrated alone (Calibrate:
// Zhang's closed form and bundle adjustment), the relative pose started
// from the component-wise median over the views of R = R_r R_lᵀ and
// T = T_r − R T_l, and then
// every parameter — both cameras, the relative pose and the target pose of
// each view — refined together by Levenberg–Marquardt over the
// reprojection errors in both images (the bundle adjustment of Hartley &
// Zisserman 2003, "Multiple View Geometry", 2nd ed., §18.1). Dots are not
// corrected for circle bias here: use a checkerboard for a rig.
func CalibrateStereo(ctx context.Context, views []StereoView, w, h int, o Options) (*StereoResult, error) {
	if o.MaxIter == 0 {
		o.MaxIter = 200
	}
	lv := make([]View, len(views))
	rv := make([]View, len(views))
	for k, v := range views {
		lv[k] = View{Name: v.Name + " (left)", Points: v.Left}
		rv[k] = View{Name: v.Name + " (right)", Points: v.Right}
	}
	lr, err := Calibrate(ctx, lv, w, h, Options{FixK3: o.FixK3, FixTangential: o.FixTangential, MaxIter: o.MaxIter})
	if err != nil {
		return nil, fmt.Errorf("stereo: left camera: %w", err)
	}
	rr, err := Calibrate(ctx, rv, w, h, Options{FixK3: o.FixK3, FixTangential: o.FixTangential, MaxIter: o.MaxIter})
	if err != nil {
		return nil, fmt.Errorf("stereo: right camera: %w", err)
	}
	// Initial relative pose: component-wise median over the views.
	comp := make([][6]float64, len(views))
	for k := range views {
		Rl, Rr := lr.Views[k].Pose.Matrix(), rr.Views[k].Pose.Matrix()
		R := mul3(Rr, transpose3(Rl))
		w := rotvec(R)
		tl := lr.Views[k].Pose.T
		var t [3]float64
		for i := range 3 {
			t[i] = rr.Views[k].Pose.T[i] - (R[i][0]*tl[0] + R[i][1]*tl[1] + R[i][2]*tl[2])
		}
		comp[k] = [6]float64{w[0], w[1], w[2], t[0], t[1], t[2]}
	}
	p := make([]float64, nRig+6*len(views))
	lvec, rvec := lr.Camera.vector(), rr.Camera.vector()
	copy(p, lvec[:])
	copy(p[nIntr:], rvec[:])
	for i := range 6 {
		col := make([]float64, len(comp))
		for k := range comp {
			col[k] = comp[k][i]
		}
		p[2*nIntr+i] = median(col)
	}
	for k := range views {
		copy(p[nRig+6*k:], lr.Views[k].Pose.Rot[:])
		copy(p[nRig+6*k+3:], lr.Views[k].Pose.T[:])
	}
	free := make([]bool, len(p))
	for i := range free {
		free[i] = true
	}
	for _, off := range []int{0, nIntr} {
		if o.FixTangential {
			free[off+6], free[off+7] = false, false
		}
		if o.FixK3 {
			free[off+8] = false
		}
	}
	f := &stereoFitter{views: views}
	iters, err := lmGeneric(ctx, p, free, f.residuals, o.MaxIter)
	if err != nil {
		return nil, fmt.Errorf("stereo: %w", err)
	}
	return f.result(p, free, w, h, iters)
}

func transpose3(a [3][3]float64) [3][3]float64 {
	return [3][3]float64{{a[0][0], a[1][0], a[2][0]}, {a[0][1], a[1][1], a[2][1]}, {a[0][2], a[1][2], a[2][2]}}
}

type stereoFitter struct{ views []StereoView }

func (f *stereoFitter) count() int {
	n := 0
	for _, v := range f.views {
		n += 2 * (len(v.Left) + len(v.Right))
	}
	return n
}

// residuals returns model − observed for every point: per view the left
// points, then the right points.
func (f *stereoFitter) residuals(p []float64, r []float64) []float64 {
	r = r[:0]
	lc, rc := cameraFrom(p[:nIntr]), cameraFrom(p[nIntr:2*nIntr])
	var rw [3]float64
	copy(rw[:], p[2*nIntr:])
	Rrel := rodrigues(rw)
	var Trel [3]float64
	copy(Trel[:], p[2*nIntr+3:])
	for k, v := range f.views {
		var ps Pose
		copy(ps.Rot[:], p[nRig+6*k:])
		copy(ps.T[:], p[nRig+6*k+3:])
		R := ps.Matrix()
		Rr := mul3(Rrel, R)
		var Tr [3]float64
		for i := range 3 {
			Tr[i] = Rrel[i][0]*ps.T[0] + Rrel[i][1]*ps.T[1] + Rrel[i][2]*ps.T[2] + Trel[i]
		}
		for _, q := range v.Left {
			x, y, ok := lc.Project(applyRT(&R, ps.T, q.X, q.Y))
			if !ok {
				x, y = q.Px+1e6, q.Py+1e6
			}
			r = append(r, x-q.Px, y-q.Py)
		}
		for _, q := range v.Right {
			x, y, ok := rc.Project(applyRT(&Rr, Tr, q.X, q.Y))
			if !ok {
				x, y = q.Px+1e6, q.Py+1e6
			}
			r = append(r, x-q.Px, y-q.Py)
		}
	}
	return r
}

// numJacobian returns the Jacobian of res at p by central differences over
// the free parameters (zero columns for the others).
func numJacobian(p []float64, free []bool, res func(p, r []float64) []float64, m int) *mat.Dense {
	n := len(p)
	J := mat.NewDense(m, n, nil)
	q := append([]float64(nil), p...)
	rp := make([]float64, 0, m)
	rm := make([]float64, 0, m)
	for j := range n {
		if !free[j] {
			continue
		}
		step := 1e-6 * math.Max(math.Abs(p[j]), 0.1)
		q[j] = p[j] + step
		rp = res(q, rp)
		q[j] = p[j] - step
		rm = res(q, rm)
		q[j] = p[j]
		for i := range m {
			J.Set(i, j, (rp[i]-rm[i])/(2*step))
		}
	}
	return J
}

// lmGeneric minimises the sum of squares of res over the free parameters of
// p by Levenberg–Marquardt with Marquardt's diagonal scaling (Moré 1978),
// updating p in place, and returns the number of iterations.
func lmGeneric(ctx context.Context, p []float64, free []bool, res func(p, r []float64) []float64, maxIter int) (int, error) {
	n := len(p)
	r := res(p, nil)
	m := len(r)
	cost := sumSq(r)
	lambda := 1e-3
	trial := make([]float64, n)
	var rt []float64
	it := 0
	for ; it < maxIter; it++ {
		if err := ctx.Err(); err != nil {
			return it, err
		}
		J := numJacobian(p, free, res, m)
		r = res(p, r)
		var A mat.SymDense
		A.SymOuterK(1, J.T())
		g := mat.NewVecDense(n, nil)
		g.MulVec(J.T(), mat.NewVecDense(m, r))
		improved := false
		for range 30 {
			M := mat.NewSymDense(n, nil)
			M.CopySym(&A)
			rhs := mat.NewVecDense(n, nil)
			for j := range n {
				if !free[j] {
					for i := range n {
						M.SetSym(i, j, 0)
					}
					M.SetSym(j, j, 1)
					continue
				}
				d := A.At(j, j)
				M.SetSym(j, j, d+lambda*math.Max(d, 1e-12))
				rhs.SetVec(j, -g.AtVec(j))
			}
			var ch mat.Cholesky
			var delta mat.VecDense
			if !ch.Factorize(M) || ch.SolveVecTo(&delta, rhs) != nil {
				lambda *= 10
				continue
			}
			for j := range n {
				trial[j] = p[j] + delta.AtVec(j)
			}
			rt = res(trial, rt)
			c := sumSq(rt)
			if c < cost {
				rel := (cost - c) / math.Max(cost, 1e-300)
				copy(p, trial)
				cost = c
				lambda = math.Max(lambda/10, 1e-15)
				improved = true
				if rel < 1e-14 {
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
			return it + 1, nil
		}
	}
	return it, nil
}

func (f *stereoFitter) result(p []float64, free []bool, w, h, iters int) (*StereoResult, error) {
	lc, rc := cameraFrom(p[:nIntr]), cameraFrom(p[nIntr:2*nIntr])
	var rw, t [3]float64
	copy(rw[:], p[2*nIntr:])
	copy(t[:], p[2*nIntr+3:])
	res := &StereoResult{Rig: Rig{Left: lc, Right: rc, R: rodrigues(rw), T: t, W: w, H: h}, Rot: rw, Iterations: iters}
	if err := res.Rig.Validate(); err != nil {
		return nil, fmt.Errorf("stereo: the fit diverged: %w", err)
	}
	r := f.residuals(p, nil)
	m := len(r)
	var idx []int
	for j, fr := range free {
		if fr {
			idx = append(idx, j)
		}
	}
	if m <= len(idx) {
		return nil, fmt.Errorf("stereo: %d residuals for %d parameters; use more views", m, len(idx))
	}
	res.Sigma = math.Sqrt(sumSq(r) / float64(m-len(idx)))
	J := numJacobian(p, free, f.residuals, m)
	Jf := mat.NewDense(m, len(idx), nil)
	for a, j := range idx {
		for i := range m {
			Jf.Set(i, a, J.At(i, j))
		}
	}
	var A mat.SymDense
	A.SymOuterK(1, Jf.T())
	var ch mat.Cholesky
	if !ch.Factorize(&A) {
		return nil, errors.New("stereo: the rig is not determined by these views (JᵀJ is singular); tilt the target in more directions, or fix k3 or the tangential terms")
	}
	var cov mat.SymDense
	if err := ch.InverseTo(&cov); err != nil {
		return nil, fmt.Errorf("stereo: covariance: %w", err)
	}
	for a, j := range idx {
		if j < nRig {
			res.Std[j] = res.Sigma * math.Sqrt(cov.At(a, a))
		}
	}
	off := 0
	var sl, sr float64
	var nl, nr int
	for k, v := range f.views {
		var ps Pose
		copy(ps.Rot[:], p[nRig+6*k:])
		copy(ps.T[:], p[nRig+6*k+3:])
		vr := StereoViewResult{Name: v.Name, Pose: ps, Points: [2]int{len(v.Left), len(v.Right)}}
		var a, b float64
		for range v.Left {
			a += r[off]*r[off] + r[off+1]*r[off+1]
			off += 2
		}
		for range v.Right {
			b += r[off]*r[off] + r[off+1]*r[off+1]
			off += 2
		}
		vr.RMSLeft = math.Sqrt(a / float64(max(1, len(v.Left))))
		vr.RMSRight = math.Sqrt(b / float64(max(1, len(v.Right))))
		sl, sr, nl, nr = sl+a, sr+b, nl+len(v.Left), nr+len(v.Right)
		res.Views = append(res.Views, vr)
	}
	res.RMSLeft = math.Sqrt(sl / float64(nl))
	res.RMSRight = math.Sqrt(sr / float64(nr))
	res.RMS = math.Sqrt((sl + sr) / float64(nl+nr))
	return res, nil
}

// CalibrateStereoImages detects target t in every left and right image
// (left[k] and right[k] taken at the same time) and calibrates the rig from
// the pairs where both images show it. Pairs with a rejected image are
// listed (the image and the reason) and left out. It returns an error if
// the counts differ, if any image differs in size from the first left one
// (naming it), or if fewer than three pairs are usable.
func CalibrateStereoImages(ctx context.Context, left, right []Image, t *Target, d DetectOptions, o Options) (*StereoResult, []Rejected, error) {
	if len(left) != len(right) {
		return nil, nil, fmt.Errorf("stereo calibrate: %d left and %d right images: give one right image for every left image, in the same order", len(left), len(right))
	}
	if len(left) == 0 {
		return nil, nil, errors.New("stereo calibrate: no images; give 10–20 simultaneous pairs of views of the target")
	}
	if t == nil {
		return nil, nil, errors.New("stereo calibrate: no target geometry; give the JSON file written by mottle target")
	}
	w, h := left[0].Gray.W, left[0].Gray.H
	for _, im := range append(append([]Image(nil), left...), right...) {
		if im.Gray.W != w || im.Gray.H != h {
			return nil, nil, fmt.Errorf("stereo calibrate: image %s is %d×%d px but %s is %d×%d px: both cameras must take images of one size",
				im.Name, im.Gray.W, im.Gray.H, left[0].Name, w, h)
		}
	}
	var views []StereoView
	var rejected []Rejected
	for k := range left {
		if err := ctx.Err(); err != nil {
			return nil, nil, fmt.Errorf("stereo calibrate: %w", err)
		}
		var pts [2][]Observation
		ok := true
		for s, im := range []Image{left[k], right[k]} {
			det, err := Detect(im.Gray, t, d)
			var re *RejectError
			switch {
			case errors.As(err, &re):
				rejected = append(rejected, Rejected{Image: im.Name, Reason: re.Reason, Detail: re.Detail})
				ok = false
			case err != nil:
				return nil, nil, fmt.Errorf("stereo calibrate: image %s: %w", im.Name, err)
			default:
				pts[s] = det.Points
			}
		}
		if ok {
			views = append(views, StereoView{Name: left[k].Name + " + " + right[k].Name, Left: pts[0], Right: pts[1]})
		}
	}
	if len(views) < minViews {
		var b strings.Builder
		for _, r := range rejected {
			fmt.Fprintf(&b, "; %s: %s (%s)", r.Image, r.Reason, r.Detail)
		}
		return nil, rejected, fmt.Errorf("stereo calibrate: %d of %d pairs usable (both images showing the target), at least %d needed (10–20 recommended)%s",
			len(views), len(left), minViews, b.String())
	}
	res, err := CalibrateStereo(ctx, views, w, h, o)
	return res, rejected, err
}

// RigFormat is the format tag of a stereo rig file.
const RigFormat = "mottle-rig/1"

// RigCamera is one camera of a rig file.
type RigCamera struct {
	Camera Params  `json:"camera"`
	Std    Params  `json:"std"`
	RMS    float64 `json:"rms_px"`
}

// RigPose is the pose of the right camera relative to the left in a rig
// file: a left-frame point p is at R(rotation_vector)·p + translation_mm in
// the right frame.
type RigPose struct {
	Rot    [3]float64 `json:"rotation_vector"`
	T      [3]float64 `json:"translation_mm"`
	StdRot [3]float64 `json:"std_rotation_vector"`
	StdT   [3]float64 `json:"std_translation_mm"`
}

// RigFile is Mottle's stereo rig file (JSON, format "mottle-rig/1"):
//
//	format          "mottle-rig/1"
//	created         RFC 3339 time of the calibration (UTC)
//	model           the camera model in words (as in mottle-camera/1)
//	image_size_px   [width, height] of both cameras' images
//	left, right     camera (fx_px … p2), std, rms_px
//	right_from_left rotation_vector, translation_mm and their std
//	baseline_mm     distance between the camera centres
//	angle_deg       angle between the optical axes
//	rms_px, sigma_px reprojection error over both cameras
//	target          the target geometry used
//	views           per pair: the target pose in the left frame, rms per camera
//	rejected        images left out, with the reason
//	caution         the limits of a calibration
type RigFile struct {
	Format        string             `json:"format"`
	Created       string             `json:"created"`
	Model         string             `json:"model"`
	Image         [2]int             `json:"image_size_px"`
	Left          RigCamera          `json:"left"`
	Right         RigCamera          `json:"right"`
	RightFromLeft RigPose            `json:"right_from_left"`
	Baseline      float64            `json:"baseline_mm"`
	Angle         float64            `json:"angle_deg"`
	RMS           float64            `json:"rms_px"`
	Sigma         float64            `json:"sigma_px"`
	Target        *Target            `json:"target,omitempty"`
	Views         []StereoViewResult `json:"views"`
	Rejected      []Rejected         `json:"rejected,omitempty"`
	Caution       string             `json:"caution"`
}

func paramsFromStd(s []float64) Params {
	return Params{Fx: s[0], Fy: s[1], Cx: s[2], Cy: s[3], K1: s[4], K2: s[5], P1: s[6], P2: s[7], K3: s[8]}
}

// NewRigFile returns the file of a rig calibration made at time now.
func NewRigFile(r *StereoResult, t *Target, rejected []Rejected, now time.Time) *RigFile {
	var tc *Target
	if t != nil {
		c := *t
		c.Points = nil
		tc = &c
	}
	f := &RigFile{
		Format: RigFormat, Created: now.UTC().Format(time.RFC3339), Model: Model,
		Image:         [2]int{r.Rig.W, r.Rig.H},
		Left:          RigCamera{Camera: paramsOf(r.Rig.Left), Std: paramsFromStd(r.Std[:nIntr]), RMS: r.RMSLeft},
		Right:         RigCamera{Camera: paramsOf(r.Rig.Right), Std: paramsFromStd(r.Std[nIntr : 2*nIntr]), RMS: r.RMSRight},
		RightFromLeft: RigPose{Rot: r.Rot, T: r.Rig.T},
		Baseline:      r.Rig.Baseline(), Angle: r.Rig.Angle(), RMS: r.RMS, Sigma: r.Sigma,
		Target: tc, Views: r.Views, Rejected: rejected, Caution: Caution,
	}
	copy(f.RightFromLeft.StdRot[:], r.Std[2*nIntr:])
	copy(f.RightFromLeft.StdT[:], r.Std[2*nIntr+3:])
	return f
}

// Rig returns the rig the file describes.
func (f *RigFile) Rig() *Rig {
	return &Rig{Left: f.Left.Camera.Camera(), Right: f.Right.Camera.Camera(),
		R: rodrigues(f.RightFromLeft.Rot), T: f.RightFromLeft.T, W: f.Image[0], H: f.Image[1]}
}

// Write writes the file as indented JSON.
func (f *RigFile) Write(w io.Writer) error {
	e := json.NewEncoder(w)
	e.SetIndent("", "  ")
	return e.Encode(f)
}

// ReadRigFile reads and validates a rig file.
func ReadRigFile(path string) (*RigFile, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("rig file: %w", err)
	}
	f, err := ParseRig(b)
	if err != nil {
		return nil, fmt.Errorf("rig file %s: %w", path, err)
	}
	return f, nil
}

// ParseRig decodes and validates a rig file's JSON.
func ParseRig(b []byte) (*RigFile, error) {
	var f RigFile
	if err := json.Unmarshal(b, &f); err != nil {
		return nil, fmt.Errorf("not a rig file (JSON: %v); give the file written by mottle calibrate --stereo", err)
	}
	if f.Format != RigFormat {
		hint := ""
		if f.Format == FileFormat {
			hint = " (this is a one-camera calibration; a stereo analysis needs the rig file of mottle calibrate --stereo)"
		}
		return nil, fmt.Errorf("format %q: want %q%s", f.Format, RigFormat, hint)
	}
	if err := f.Rig().Validate(); err != nil {
		return nil, err
	}
	return &f, nil
}

package calib

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"time"
)

// FileFormat is the format tag of a camera calibration file.
const FileFormat = "mottle-camera/1"

// Model names the camera model of a calibration file.
const Model = "pinhole with Brown–Conrady distortion (k1, k2, k3 radial; p1, p2 tangential), normalised coordinates"

// Caution is written into every calibration file and shown with results
// that use one.
const Caution = "A calibration is valid only for the lens, focus, aperture and image size it was made with. " +
	"Its uncertainty adds to that of every measurement; confirm critical results with a calibrated extensometer " +
	"and defer to local codes and licensed engineers for safety decisions."

// Params are the camera parameters by name, as written to a file.
type Params struct {
	Fx float64 `json:"fx_px"`
	Fy float64 `json:"fy_px"`
	Cx float64 `json:"cx_px"`
	Cy float64 `json:"cy_px"`
	K1 float64 `json:"k1"`
	K2 float64 `json:"k2"`
	K3 float64 `json:"k3"`
	P1 float64 `json:"p1"`
	P2 float64 `json:"p2"`
}

func paramsOf(c Camera) Params {
	return Params{c.Fx, c.Fy, c.Cx, c.Cy, c.K1, c.K2, c.K3, c.P1, c.P2}
}

// Camera returns the parameters as a Camera.
func (p Params) Camera() Camera {
	return Camera{Fx: p.Fx, Fy: p.Fy, Cx: p.Cx, Cy: p.Cy, K1: p.K1, K2: p.K2, K3: p.K3, P1: p.P1, P2: p.P2}
}

// Rejected is an image left out of a calibration, and why.
type Rejected struct {
	Image  string `json:"image"`
	Reason Reason `json:"reason"`
	Detail string `json:"detail"`
}

// Plane is the pose of the specimen plane: the pose of a target view taken
// with the target lying in that plane. With it, positions are mapped to mm
// in the plane.
type Plane struct {
	Image string `json:"image"`
	Pose  Pose   `json:"pose"`
}

// File is Mottle's camera calibration file (JSON, format "mottle-camera/1").
//
//	format         "mottle-camera/1"
//	created        RFC 3339 time of the calibration (UTC)
//	model          the camera model in words
//	image_size_px  [width, height] of the calibration images; the file
//	               applies only to images of this size
//	camera         fx_px, fy_px, cx_px, cy_px, k1, k2, k3, p1, p2
//	std            their standard deviations (0 for a fixed parameter)
//	rms_px         reprojection error, RMS of the error lengths over all points
//	sigma_px       standard deviation of one residual coordinate
//	target         the target geometry used
//	views          per image: pose, rms_px, max_px, points, outlier, residuals
//	rejected       images left out, with the reason
//	plane          optional: the view whose target lay in the specimen plane
//	caution        the limits of a calibration
type File struct {
	Format   string       `json:"format"`
	Created  string       `json:"created"`
	Model    string       `json:"model"`
	Image    [2]int       `json:"image_size_px"`
	Camera   Params       `json:"camera"`
	Std      Params       `json:"std"`
	RMS      float64      `json:"rms_px"`
	Sigma    float64      `json:"sigma_px"`
	Target   *Target      `json:"target,omitempty"`
	Views    []ViewResult `json:"views"`
	Rejected []Rejected   `json:"rejected,omitempty"`
	Plane    *Plane       `json:"plane,omitempty"`
	Caution  string       `json:"caution"`
}

// NewFile returns the file of a calibration made at time now.
func NewFile(r *Result, t *Target, rejected []Rejected, now time.Time) *File {
	var std Camera
	std.Fx, std.Fy, std.Cx, std.Cy = r.Std[0], r.Std[1], r.Std[2], r.Std[3]
	std.K1, std.K2, std.P1, std.P2, std.K3 = r.Std[4], r.Std[5], r.Std[6], r.Std[7], r.Std[8]
	var tc *Target
	if t != nil {
		c := *t
		c.Points = nil
		tc = &c
	}
	return &File{
		Format: FileFormat, Created: now.UTC().Format(time.RFC3339), Model: Model,
		Image: [2]int{r.W, r.H}, Camera: paramsOf(r.Camera), Std: paramsOf(std),
		RMS: r.RMS, Sigma: r.Sigma, Target: tc, Views: r.Views, Rejected: rejected, Caution: Caution,
	}
}

// SetPlane makes the view of the named image the specimen plane. It
// returns an error naming the views if there is no such view.
func (f *File) SetPlane(image string) error {
	var names []string
	for _, v := range f.Views {
		if v.Name == image {
			f.Plane = &Plane{Image: v.Name, Pose: v.Pose}
			return nil
		}
		names = append(names, v.Name)
	}
	return fmt.Errorf("plane view %q: not among the calibrated views %q", image, names)
}

// Write encodes f as indented JSON.
func (f *File) Write(w io.Writer) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(f)
}

// ReadFile reads and checks a calibration file; errors name the file.
func ReadFile(path string) (*File, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("calibration file: %w", err)
	}
	f, err := Parse(b)
	if err != nil {
		return nil, fmt.Errorf("calibration file %s: %w", path, err)
	}
	return f, nil
}

// Parse decodes and checks calibration JSON.
func Parse(b []byte) (*File, error) {
	var f File
	if err := json.Unmarshal(b, &f); err != nil {
		return nil, fmt.Errorf("not a calibration file (JSON written by mottle calibrate): %w", err)
	}
	if err := f.Validate(); err != nil {
		return nil, err
	}
	return &f, nil
}

// Validate reports every problem of f at once.
func (f *File) Validate() error {
	var errs []error
	if f.Format != FileFormat {
		errs = append(errs, fmt.Errorf("format %q: want %q (a file written by mottle calibrate)", f.Format, FileFormat))
	}
	if f.Image[0] <= 0 || f.Image[1] <= 0 {
		errs = append(errs, fmt.Errorf("image_size_px %v: want the positive width and height of the calibration images", f.Image))
	}
	if err := f.Camera.Camera().Validate(); err != nil {
		errs = append(errs, err)
	}
	return errors.Join(errs...)
}

// Mapping converts measured image positions to corrected ones: undistorted
// pixels, or mm in the specimen plane when the file has a plane.
type Mapping struct {
	cam   Camera
	plane *Pose
	w, h  int
	name  string
}

// Mapping returns the position mapping of f. name says where the
// calibration came from (a file name), for results and messages.
func (f *File) Mapping(name string) (*Mapping, error) {
	if err := f.Validate(); err != nil {
		return nil, err
	}
	m := &Mapping{cam: f.Camera.Camera(), w: f.Image[0], h: f.Image[1], name: name}
	if f.Plane != nil {
		p := f.Plane.Pose
		m.plane = &p
	}
	return m, nil
}

// Name returns the name the mapping was made with.
func (m *Mapping) Name() string { return m.name }

// Unit returns "mm" when positions map to the specimen plane, else "px".
func (m *Mapping) Unit() string {
	if m.plane != nil {
		return "mm"
	}
	return "px"
}

// Camera returns the camera of the mapping.
func (m *Mapping) Camera() Camera { return m.cam }

// Check returns an error if an image of w×h px was not taken with the
// calibrated image size.
func (m *Mapping) Check(image string, w, h int) error {
	if w != m.w || h != m.h {
		return fmt.Errorf("image %s is %d×%d px but the calibration %s is for %d×%d px images: use images of the calibrated camera at its calibrated size, or calibrate at this size",
			image, w, h, m.name, m.w, m.h)
	}
	return nil
}

// Map returns the corrected position of the image point (x, y): the
// undistorted pixel, or the point in mm in the specimen plane.
func (m *Mapping) Map(x, y float64) (float64, float64, error) {
	if m.plane != nil {
		return m.cam.PlanePoint(*m.plane, x, y)
	}
	return m.cam.UndistortPixel(x, y)
}

// Jacobian returns the corrected position of the image point (x, y) and the
// derivative J[i][j] = ∂X_i/∂x_j of the mapping there, by central
// differences over ±0.25 px (the mapping is smooth; the truncation error is
// far below the calibration's own uncertainty).
func (m *Mapping) Jacobian(x, y float64) (X, Y float64, J [2][2]float64, err error) {
	const h = 0.25
	if X, Y, err = m.Map(x, y); err != nil {
		return 0, 0, J, err
	}
	var p [4][2]float64
	for k, d := range [4][2]float64{{h, 0}, {-h, 0}, {0, h}, {0, -h}} {
		a, b, err := m.Map(x+d[0], y+d[1])
		if err != nil {
			return 0, 0, J, err
		}
		p[k] = [2]float64{a, b}
	}
	for i := range 2 {
		J[i][0] = (p[0][i] - p[1][i]) / (2 * h)
		J[i][1] = (p[2][i] - p[3][i]) / (2 * h)
	}
	return X, Y, J, nil
}

// Compact returns a copy of f without the per-point residuals and the
// target's point list: what an analysis needs to carry along (camera,
// uncertainty, image size, plane, per-view summary).
func (f *File) Compact() *File {
	c := *f
	c.Views = make([]ViewResult, len(f.Views))
	for k, v := range f.Views {
		v.Residuals = nil
		c.Views[k] = v
	}
	if f.Target != nil {
		t := *f.Target
		t.Points = nil
		c.Target = &t
	}
	return &c
}

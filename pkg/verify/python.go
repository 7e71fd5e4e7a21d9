package verify

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"time"
)

// Python is the interpreter the reference drivers run with: Debian's own,
// which sees the python3-* packages (another python3 may come first on PATH).
const Python = "/usr/bin/python3"

// Module is a Python module a driver imports and the Debian package that
// provides it.
type Module struct {
	Import string // Python import name
	Debian string // Debian package to install
}

// Modules returns the Python modules the reference drivers need.
func Modules() []Module {
	return []Module{
		{"numpy", "python3-numpy"},
		{"scipy", "python3-scipy"},
		{"cv2", "python3-opencv"},
		{"skimage", "python3-skimage"},
	}
}

// CheckPython reports every reference module that python cannot import, as
// one error naming the Debian packages to install; nil if all import.
func CheckPython(ctx context.Context, python string) error {
	if _, err := os.Stat(python); err != nil {
		return fmt.Errorf("reference interpreter %s: %w; install the Debian package python3 (and %s)",
			python, err, strings.Join(debianNames(Modules()), " "))
	}
	var missing []Module
	var errs []error
	for _, m := range Modules() {
		cmd := exec.CommandContext(ctx, python, "-c", "import "+m.Import)
		var stderr bytes.Buffer
		cmd.Stderr = &stderr
		if err := cmd.Run(); err != nil {
			missing = append(missing, m)
			errs = append(errs, fmt.Errorf("%s cannot import %s (%v: %s)", python, m.Import, err, lastLine(stderr.String())))
		}
	}
	if len(missing) == 0 {
		return nil
	}
	return fmt.Errorf("reference libraries missing: install the Debian packages %s (apt-get install -y %s): %w",
		strings.Join(debianNames(missing), ", "), strings.Join(debianNames(missing), " "), errors.Join(errs...))
}

func debianNames(ms []Module) []string {
	var s []string
	for _, m := range ms {
		s = append(s, m.Debian)
	}
	return s
}

func lastLine(s string) string {
	s = strings.TrimSpace(s)
	if i := strings.LastIndexByte(s, '\n'); i >= 0 {
		return s[i+1:]
	}
	return s
}

// Method names a reference method of the drivers.
type Method string

const (
	// ECC is OpenCV findTransformECC with MOTION_AFFINE per subset, started
	// from the Template result (scripts/ref_opencv.py).
	ECC Method = "ecc"
	// ECCDefault is ECC with OpenCV's own default stop, 50 iterations or a
	// change of the correlation coefficient below 1e-3 (ECC's stop is 200
	// and 1e-8). Neither stop is always the more accurate.
	ECCDefault Method = "ecc_default"
	// Template is OpenCV matchTemplate with TM_CCOEFF_NORMED, integer
	// displacements only (scripts/ref_opencv.py).
	Template Method = "template"
	// Phase is scikit-image phase_cross_correlation with upsampling, a
	// translation-only model (scripts/ref_skimage.py).
	Phase Method = "phase"
	// PhaseHann is Phase with a Hann window on both subsets
	// (scripts/ref_skimage.py).
	PhaseHann Method = "phase_hann"
)

// Script returns the driver file that implements m.
func (m Method) Script() (string, error) {
	switch m {
	case ECC, ECCDefault, Template:
		return "ref_opencv.py", nil
	case Phase, PhaseHann:
		return "ref_skimage.py", nil
	}
	return "", fmt.Errorf("reference method %q unknown; use %q, %q, %q, %q or %q", string(m), ECC, ECCDefault, Template, Phase, PhaseHann)
}

// Label returns a short human name of the method and its library.
func (m Method) Label() string {
	switch m {
	case ECC:
		return "OpenCV ECC affine, tight stop"
	case ECCDefault:
		return "OpenCV ECC affine, default stop"
	case Template:
		return "OpenCV matchTemplate"
	case Phase:
		return "skimage phase corr."
	case PhaseHann:
		return "skimage phase corr. + Hann"
	}
	return string(m)
}

// Request is the input of a driver; see scripts/refcommon.py for the format.
type Request struct {
	Reference string       `json:"reference"` // image file (.npy or an image OpenCV reads)
	Deformed  string       `json:"deformed"`
	Method    Method       `json:"method"`
	Subset    int          `json:"subset"`          // odd subset side, px
	Search    int          `json:"search"`          // integer search radius around the guess, px
	Points    [][2]int     `json:"points"`          // subset centres (x, y)
	Guess     [][2]float64 `json:"guess,omitempty"` // initial (u, v) per point; nil = 0
	// ECCMaxIter and ECCEps set the ECC stop (iterations, change of the
	// correlation coefficient); 0 = the driver's accurate default, 200 and
	// 1e-8 for ECC, 50 and 1e-3 (OpenCV's own default) for ECCDefault.
	ECCMaxIter int     `json:"ecc_max_iter,omitempty"`
	ECCEps     float64 `json:"ecc_eps,omitempty"`
}

// RefPoint is a driver's result at one point.
type RefPoint struct {
	X     int     `json:"x"`
	Y     int     `json:"y"`
	U     float64 `json:"u"`
	V     float64 `json:"v"`
	OK    bool    `json:"ok"`
	Score float64 `json:"score"` // ZNCC, ECC rho, or 1 − registration error
	Error string  `json:"error"`
}

// Response is the output of a driver.
type Response struct {
	Library  string         `json:"library"`
	Version  string         `json:"version"`
	Method   Method         `json:"method"`
	Settings map[string]any `json:"settings"`
	Seconds  float64        `json:"seconds"` // time of the per-point loop only
	// CPUSeconds is the CPU time (user and system) of the process during
	// that loop, 0 if the driver does not report it. On a shared machine
	// it is the figure that other processes do not inflate.
	CPUSeconds float64    `json:"cpu_seconds,omitempty"`
	Points     []RefPoint `json:"points"`

	// Filled by Runner.Run, not by the driver:
	Wall    time.Duration `json:"-"` // whole process, including start-up and image loading
	PeakRSS int64         `json:"-"` // peak resident memory of the process, bytes (0 if unknown)
}

// Disp returns the displacements as a slice of Disp, in point order.
func (r *Response) Disp() []Disp {
	d := make([]Disp, len(r.Points))
	for i, p := range r.Points {
		d[i] = Disp{U: p.U, V: p.V, OK: p.OK}
	}
	return d
}

// Runner runs the reference drivers.
type Runner struct {
	// Python is the interpreter; "" means Python (/usr/bin/python3).
	Python string
	// Scripts is the directory holding ref_opencv.py and ref_skimage.py;
	// "" means FindScripts from the working directory.
	Scripts string
	// Dir is where request files are written; "" means os.TempDir().
	Dir string
}

// FindScripts returns the scripts/ directory of the Mottle source tree by
// walking up from dir until it finds scripts/ref_opencv.py.
func FindScripts(dir string) (string, error) {
	abs, err := filepath.Abs(dir)
	if err != nil {
		return "", fmt.Errorf("find scripts: %w", err)
	}
	for d := abs; ; d = filepath.Dir(d) {
		s := filepath.Join(d, "scripts")
		if _, err := os.Stat(filepath.Join(s, "ref_opencv.py")); err == nil {
			return s, nil
		}
		if filepath.Dir(d) == d {
			return "", fmt.Errorf("find scripts: no scripts/ref_opencv.py in %s or any parent; run from the Mottle source tree", abs)
		}
	}
}

// Run sends req to the driver of req.Method and returns its decoded
// response. The driver's stderr is included in the error if it fails; the
// number of returned points always equals len(req.Points).
func (r Runner) Run(ctx context.Context, req Request) (*Response, error) {
	script, err := req.Method.Script()
	if err != nil {
		return nil, err
	}
	python := r.Python
	if python == "" {
		python = Python
	}
	dir := r.Scripts
	if dir == "" {
		if dir, err = FindScripts("."); err != nil {
			return nil, err
		}
	}
	body, err := json.Marshal(req)
	if err != nil {
		return nil, fmt.Errorf("reference %s: encode request: %w", req.Method, err)
	}
	f, err := os.CreateTemp(r.Dir, "mottle-ref-*.json")
	if err != nil {
		return nil, fmt.Errorf("reference %s: request file: %w", req.Method, err)
	}
	defer os.Remove(f.Name())
	if _, err := f.Write(body); err != nil {
		f.Close()
		return nil, fmt.Errorf("reference %s: write request: %w", req.Method, err)
	}
	if err := f.Close(); err != nil {
		return nil, fmt.Errorf("reference %s: write request: %w", req.Method, err)
	}

	cmd := exec.CommandContext(ctx, python, filepath.Join(dir, script), f.Name())
	var stdout, stderr bytes.Buffer
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	start := time.Now()
	err = cmd.Run()
	wall := time.Since(start)
	if err != nil {
		return nil, fmt.Errorf("reference %s: %s %s: %w: %s", req.Method, python, script, err, strings.TrimSpace(stderr.String()))
	}
	var resp Response
	if err := json.Unmarshal(stdout.Bytes(), &resp); err != nil {
		return nil, fmt.Errorf("reference %s: decode output of %s: %w", req.Method, script, err)
	}
	if len(resp.Points) != len(req.Points) {
		return nil, fmt.Errorf("reference %s: %s returned %d points for %d requested", req.Method, script, len(resp.Points), len(req.Points))
	}
	resp.Wall = wall
	resp.PeakRSS = PeakRSS(cmd.ProcessState)
	return &resp, nil
}

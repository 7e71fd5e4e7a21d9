package verify

import (
	"context"
	"fmt"
	"math"
	"path/filepath"
	"strings"
	"time"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// BenchCase is one benchmark pair: a size×size 8-bit rendered image pair
// and a square grid of points with the given step.
type BenchCase struct {
	Name   string
	Motion synth.Motion
	Size   int
	Subset int
	Step   int
	Noise  float64
	Seed   int64
}

// BenchCases returns the standard benchmark pairs: a subpixel translation
// and a homogeneous 1.2 % strain with shear, 512×512 px with 2 grey levels
// of noise, subsets 21 and 31 on a 12 px grid (1444–1521 points each).
func BenchCases() []BenchCase {
	tr := synth.Translation{U: 0.37, V: -1.62}
	af := synth.Affine{F: [2][2]float64{{1.012, 0.004}, {-0.003, 0.994}}, CX: 256, CY: 256, U: 0.41, V: -0.77}
	var cs []BenchCase
	for _, n := range []int{21, 31} {
		cs = append(cs,
			BenchCase{Name: "translation", Motion: tr, Size: 512, Subset: n, Step: 12, Noise: 2, Seed: 11},
			BenchCase{Name: "affine 1.2 %", Motion: af, Size: 512, Subset: n, Step: 12, Noise: 2, Seed: 12})
	}
	return cs
}

// Points returns the case's grid and the exact displacement at each point.
func (c BenchCase) Points() ([][2]int, [][2]float64) {
	return Case{Motion: c.Motion, W: c.Size, H: c.Size, Subset: c.Subset, Step: c.Step, Margin: 8}.Grid()
}

// Files renders the pair and writes it as 8-bit PNG files into dir (both
// Mottle and OpenCV read these same files). It returns their paths.
func (c BenchCase) Files(dir string) (ref, def string, err error) {
	cc := Case{Name: c.Name, Motion: c.Motion, W: c.Size, H: c.Size, Noise: c.Noise, Seed: c.Seed}
	r, d, err := cc.Render()
	if err != nil {
		return "", "", err
	}
	base := filepath.Join(dir, fmt.Sprintf("%s-%d", strings.NewReplacer(" ", "_", "%", "pc", ".", "_").Replace(c.Name), c.Subset))
	ref, def = base+"-ref.png", base+"-def.png"
	if err := imageio.WriteFile(ref, r, 8); err != nil {
		return "", "", err
	}
	if err := imageio.WriteFile(def, d, 8); err != nil {
		return "", "", err
	}
	return ref, def, nil
}

// MottleResponse runs Mottle (MottleTracker with the given options) on a
// driver Request whose images are files Mottle can read, and answers in
// the drivers' Response format, Seconds being the time of the tracking
// alone (image decoding excluded, as in the drivers). cmd/mottle-bench runs
// it in a child process so that its peak memory is measured like the
// drivers'.
func MottleResponse(ctx context.Context, req Request, opt correlate.Options) (*Response, error) {
	ref, err := imageio.ReadFile(req.Reference, imageio.DefaultLimits())
	if err != nil {
		return nil, fmt.Errorf("mottle worker: %w", err)
	}
	def, err := imageio.ReadFile(req.Deformed, imageio.DefaultLimits())
	if err != nil {
		return nil, fmt.Errorf("mottle worker: %w", err)
	}
	start := time.Now()
	d, err := MottleTracker(opt)(ctx, ref, def, req.Points, req.Subset)
	secs := time.Since(start).Seconds()
	if err != nil {
		return nil, err
	}
	resp := &Response{Library: "mottle", Method: "icgn", Seconds: secs,
		Settings: map[string]any{"subset": req.Subset, "threads": opt.Threads, "shape": int(opt.Shape)}}
	for i, p := range req.Points {
		resp.Points = append(resp.Points, RefPoint{X: p[0], Y: p[1], U: d[i].U, V: d[i].V, OK: d[i].OK})
	}
	return resp, nil
}

// BenchRow is one measured method on one benchmark case.
type BenchRow struct {
	Case    BenchCase
	Method  string
	Points  int
	Seconds float64       // time of the per-point work (loop) only
	Wall    time.Duration // whole process
	PeakRSS int64         // bytes
	Err     ErrorStats    // against the exact truth
}

// PointsPerSecond returns Points / Seconds.
func (r BenchRow) PointsPerSecond() float64 { return float64(r.Points) / r.Seconds }

// RowFrom summarises a response against the truth.
func RowFrom(c BenchCase, method string, resp *Response, truth [][2]float64) (BenchRow, error) {
	e, err := Errors(resp.Disp(), truth)
	if err != nil {
		return BenchRow{}, err
	}
	return BenchRow{Case: c, Method: method, Points: len(resp.Points), Seconds: resp.Seconds,
		Wall: resp.Wall, PeakRSS: resp.PeakRSS, Err: e}, nil
}

// BenchTable formats benchmark rows as Markdown, with the speed ratio of
// each Mottle row to the OpenCV ECC row of the same case.
func BenchTable(rows []BenchRow) string {
	var b strings.Builder
	b.WriteString("| pair | subset | points | method | points/s | vs ECC default stop | RMS error (px) | max error (px) | failed | peak RSS (MiB) | process wall (s) |\n")
	b.WriteString("|---|---:|---:|---|---:|---:|---:|---:|---:|---:|---:|\n")
	for _, r := range rows {
		ratio := "–"
		for _, o := range rows {
			if sameCase(o.Case, r.Case) && o.Method == ECCLabel && strings.HasPrefix(r.Method, "Mottle") {
				ratio = fmt.Sprintf("%.1f×", r.PointsPerSecond()/o.PointsPerSecond())
			}
		}
		fmt.Fprintf(&b, "| %s | %d | %d | %s | %.0f | %s | %.4f | %.4f | %d | %.0f | %.2f |\n",
			r.Case.Name, r.Case.Subset, r.Points, r.Method, r.PointsPerSecond(), ratio,
			r.Err.RMS, r.Err.Max, r.Err.Failed, float64(r.PeakRSS)/(1<<20), r.Wall.Seconds())
	}
	return b.String()
}

// Method names of the OpenCV ECC rows in BenchTable. Speed ratios are
// taken against ECCLabel: ECC with OpenCV's own default stop (50
// iterations or a change of the correlation coefficient below 1e-3), the
// faster of the two, so the ratio does not flatter Mottle. ECCTightLabel
// is the accurate stop of the cross-checks (200 iterations, 1e-8).
const (
	ECCLabel      = "OpenCV ECC affine, default stop (1 thread)"
	ECCTightLabel = "OpenCV ECC affine, tight stop (1 thread)"
)

// geoMean returns the geometric mean of xs, NaN if empty.
func geoMean(xs []float64) float64 {
	if len(xs) == 0 {
		return math.NaN()
	}
	var s float64
	for _, x := range xs {
		s += math.Log(x)
	}
	return math.Exp(s / float64(len(xs)))
}

// SpeedRatio returns the geometric mean over cases of the points/s of the
// rows named method over those of OpenCV ECC on the same case.
func SpeedRatio(rows []BenchRow, method string) float64 {
	var rs []float64
	for _, r := range rows {
		if r.Method != method {
			continue
		}
		for _, o := range rows {
			if sameCase(o.Case, r.Case) && o.Method == ECCLabel {
				rs = append(rs, r.PointsPerSecond()/o.PointsPerSecond())
			}
		}
	}
	return geoMean(rs)
}

func sameCase(a, b BenchCase) bool {
	return a.Name == b.Name && a.Subset == b.Subset && a.Size == b.Size
}

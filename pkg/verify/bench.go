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
// alone (image decoding excluded, as in the drivers) and CPUSeconds the
// process's CPU time during it. cmd/mottle-bench runs
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
	start, c0 := time.Now(), processCPU()
	d, err := MottleTracker(opt)(ctx, ref, def, req.Points, req.Subset)
	secs, cpu := time.Since(start).Seconds(), (processCPU() - c0).Seconds()
	if err != nil {
		return nil, err
	}
	resp := &Response{Library: "mottle", Method: "icgn", Seconds: secs, CPUSeconds: cpu,
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
	CPU     float64       // CPU seconds of that work, all its threads or processes (0: unknown)
	Wall    time.Duration // whole process
	PeakRSS int64         // bytes
	Err     ErrorStats    // against the exact truth
}

// PointsPerSecond returns Points / Seconds.
func (r BenchRow) PointsPerSecond() float64 { return float64(r.Points) / r.Seconds }

// PointsPerCPUSecond returns Points / CPU, NaN if the CPU time is unknown.
func (r BenchRow) PointsPerCPUSecond() float64 {
	if r.CPU <= 0 {
		return math.NaN()
	}
	return float64(r.Points) / r.CPU
}

// RowFrom summarises a response against the truth.
func RowFrom(c BenchCase, method string, resp *Response, truth [][2]float64) (BenchRow, error) {
	e, err := Errors(resp.Disp(), truth)
	if err != nil {
		return BenchRow{}, err
	}
	return BenchRow{Case: c, Method: method, Points: len(resp.Points), Seconds: resp.Seconds, CPU: resp.CPUSeconds,
		Wall: resp.Wall, PeakRSS: resp.PeakRSS, Err: e}, nil
}

// BenchTable formats benchmark rows as Markdown. Each Mottle row gets its
// speed ratio to the OpenCV ECC row (default stop) of the same case with
// as many cores: the one-process row for one thread, the ECC2Label row
// for all cores, both in points per second and in points per CPU second.
func BenchTable(rows []BenchRow) string {
	var b strings.Builder
	b.WriteString("| pair | subset | points | method | points/s | points/CPU-s | vs ECC default stop, same cores (points/s; CPU) | RMS error (px) | max error (px) | failed | peak RSS (MiB) | process wall (s) |\n")
	b.WriteString("|---|---:|---:|---|---:|---:|---:|---:|---:|---:|---:|---:|\n")
	for _, r := range rows {
		ratio := "–"
		if o, ok := eccRow(rows, r); ok {
			ratio = fmt.Sprintf("%.1f×; %.1f×", r.PointsPerSecond()/o.PointsPerSecond(), r.PointsPerCPUSecond()/o.PointsPerCPUSecond())
		}
		fmt.Fprintf(&b, "| %s | %d | %d | %s | %.0f | %.0f | %s | %.4f | %.4f | %d | %.0f | %.2f |\n",
			r.Case.Name, r.Case.Subset, r.Points, r.Method, r.PointsPerSecond(), r.PointsPerCPUSecond(), ratio,
			r.Err.RMS, r.Err.Max, r.Err.Failed, float64(r.PeakRSS)/(1<<20), r.Wall.Seconds())
	}
	return b.String()
}

// eccRow returns the OpenCV ECC row (default stop) that Mottle row r is
// compared with: same case, and ECC2Label for a row with "threads" (all
// cores) in its method, ECCLabel otherwise.
func eccRow(rows []BenchRow, r BenchRow) (BenchRow, bool) {
	if !strings.HasPrefix(r.Method, "Mottle") {
		return BenchRow{}, false
	}
	want := ECCLabel
	if strings.Contains(r.Method, "threads") {
		want = ECC2Label
	}
	for _, o := range rows {
		if sameCase(o.Case, r.Case) && o.Method == want {
			return o, true
		}
	}
	return BenchRow{}, false
}

// Method names of the OpenCV ECC rows in BenchTable. Speed ratios are
// taken against ECCLabel: ECC with OpenCV's own default stop (50
// iterations or a change of the correlation coefficient below 1e-3), the
// faster of the two, so the ratio does not flatter Mottle; ECC2Label is
// the same loop on all cores (the points split over one driver process per
// core, run at once). ECCTightLabel is the accurate stop of the
// cross-checks (200 iterations, 1e-8).
const (
	ECCLabel      = "OpenCV ECC affine, default stop (1 thread)"
	ECC2Label     = "OpenCV ECC affine, default stop (1 process per core)"
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
// rows named method over those of the OpenCV ECC row they are compared
// with (see BenchTable), and the same for points per CPU second.
func SpeedRatio(rows []BenchRow, method string) (wall, cpu float64) {
	var rs, cs []float64
	for _, r := range rows {
		if r.Method != method {
			continue
		}
		if o, ok := eccRow(rows, r); ok {
			rs = append(rs, r.PointsPerSecond()/o.PointsPerSecond())
			cs = append(cs, r.PointsPerCPUSecond()/o.PointsPerCPUSecond())
		}
	}
	return geoMean(rs), geoMean(cs)
}

func sameCase(a, b BenchCase) bool {
	return a.Name == b.Name && a.Subset == b.Subset && a.Size == b.Size
}

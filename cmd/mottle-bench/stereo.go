package main

import (
	"context"
	"fmt"
	"io"
	"runtime"
	"sort"
	"syscall"
	"time"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/spline"
	"github.com/mottledic/mottle/pkg/stereo"
	"github.com/mottledic/mottle/pkg/synth"
)

type tenthMM struct{ p *synth.Pattern }

func (s tenthMM) Value(X, Y float64) float64 { return s.p.Value(10*X, 10*Y) }

// stereoSpeed measures, in one run on the same images, the 2D correlation
// of the left camera (the baseline), the stereo match of the reference
// pair, and the tracking of a deformed pair, on the invented bench
// (synth.BenchRig: a plane moved 1 mm toward the cameras), and prints
// points per second and the ratios to the 2D figure.
func stereoSpeed(ctx context.Context, w io.Writer, quick bool) error {
	W, H, step := 1024, 768, 16
	if quick {
		W, H, step = 320, 240, 12
	}
	p, err := synth.NewPattern(synth.PatternOptions{Diameter: 4.5 * 1024 / float64(W), Seed: 21,
		Bounds: synth.Rect{X0: -750, Y0: -600, X1: 750, Y1: 600}})
	if err != nil {
		return err
	}
	lc, rc := synth.BenchRig(W, H)
	var imgs []*imageio.Gray
	for k, pl := range []synth.Placement{{Shape: synth.Plane{}}, {Shape: synth.Plane{}, Pose: synth.Pose{T: [3]float64{0, 0, 1}}}} {
		for s, c := range []synth.Cam{lc, rc} {
			g, _, err := synth.RenderSurface(tenthMM{p}, pl, c, synth.RenderOptions{W: W, H: H, Supersample: 2, Noise: 0.5, Seed: int64(2*k + s)})
			if err != nil {
				return err
			}
			imgs = append(imgs, g)
		}
	}
	cam := func(c synth.Lens) calib.Camera {
		return calib.Camera{Fx: c.Fx, Fy: c.Fy, Cx: c.Cx, Cy: c.Cy, K1: c.K1, K2: c.K2, K3: c.K3, P1: c.P1, P2: c.P2}
	}
	var R [3][3]float64
	for i := range 3 {
		for j := range 3 {
			for k := range 3 {
				R[i][j] += rc.Pose.R[i][k] * lc.Pose.R[j][k]
			}
		}
	}
	var T [3]float64
	for i := range 3 {
		T[i] = rc.Pose.T[i] - (R[i][0]*lc.Pose.T[0] + R[i][1]*lc.Pose.T[1] + R[i][2]*lc.Pose.T[2])
	}
	rig := &calib.Rig{Left: cam(lc.Lens), Right: cam(rc.Lens), R: R, T: T, W: W, H: H}
	co := correlate.Options{Subset: 31, Step: step, Shape: correlate.Second, Interp: spline.Quintic, Prefilter: 0.7}

	// Three stages, interleaved over rounds so that a change of the
	// machine's load falls on all of them; each stage's figure is its
	// median over the rounds, wall-clock and CPU (user + system) seconds.
	rounds := 2
	if quick {
		rounds = 1
	}
	var n2, nm, nt int
	wall := [3][]float64{}
	cpu := [3][]float64{}
	timed := func(k int, f func() error) error {
		t0, c0 := time.Now(), cpuSeconds()
		if err := f(); err != nil {
			return err
		}
		wall[k] = append(wall[k], time.Since(t0).Seconds())
		cpu[k] = append(cpu[k], cpuSeconds()-c0)
		return nil
	}
	for range rounds {
		var ref *stereo.Reference
		if err := timed(0, func() error {
			r2, err := correlate.Run(ctx, imgs[0], imgs[2], co)
			if err == nil {
				n2 = r2.Stats.OK
			}
			return err
		}); err != nil {
			return err
		}
		if err := timed(1, func() error {
			var err error
			ref, err = stereo.Match(ctx, rig, imgs[0], imgs[1], stereo.Options{Correlate: co})
			if err == nil {
				nm = ref.OK()
			}
			return err
		}); err != nil {
			return err
		}
		if err := timed(2, func() error {
			st, err := ref.Track(ctx, imgs[0], imgs[1], imgs[2], imgs[3])
			if err == nil {
				nt = st.OK()
			}
			return err
		}); err != nil {
			return err
		}
	}
	var mw, mc [3]float64
	for k := range 3 {
		mw[k], mc[k] = median(wall[k]), median(cpu[k])
	}
	pw := [3]float64{float64(n2) / mw[0], float64(nm) / mw[1], float64(nt) / mw[2]}
	pc := [3]float64{float64(n2) / mc[0], float64(nm) / mc[1], float64(nt) / mc[2]}
	fw, fc := float64(nt)/(mw[1]+mw[2]), float64(nt)/(mc[1]+mc[2])
	fmt.Fprintf(w, "\nStereo (%d×%d px bench scene, subset 31, step %d, second-order shape, quintic, prefilter 0.7 px, all %d cores; median of %d interleaved rounds):\n\n", W, H, step, runtime.NumCPU(), rounds)
	fmt.Fprintf(w, "| stage | points | points/s (wall) | points per CPU-second | ratio to 2D (wall / CPU) |\n|---|---:|---:|---:|---:|\n")
	fmt.Fprintf(w, "| 2D correlation, left camera (baseline) | %d | %.0f | %.0f | 1.00 / 1.00 |\n", n2, pw[0], pc[0])
	fmt.Fprintf(w, "| stereo match, left → right reference | %d | %.0f | %.0f | %.2f / %.2f |\n", nm, pw[1], pc[1], pw[1]/pw[0], pc[1]/pc[0])
	fmt.Fprintf(w, "| stereo tracking of a deformed pair (both cameras, triangulation) | %d | %.0f | %.0f | %.2f / %.2f |\n", nt, pw[2], pc[2], pw[2]/pw[0], pc[2]/pc[0])
	fmt.Fprintf(w, "| a full stereo state (match + tracking) | %d | %.0f | %.0f | %.2f / %.2f |\n", nt, fw, fc, fw/pw[0], fc/pc[0])
	return nil
}

// cpuSeconds returns the CPU time (user + system) of the process so far.
func cpuSeconds() float64 {
	var r syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &r); err != nil {
		return 0
	}
	return float64(r.Utime.Nano()+r.Stime.Nano()) / 1e9
}

// median returns the median of v (0 for none).
func median(v []float64) float64 {
	if len(v) == 0 {
		return 0
	}
	s := append([]float64(nil), v...)
	sort.Float64s(s)
	if len(s)%2 == 1 {
		return s[len(s)/2]
	}
	return (s[len(s)/2-1] + s[len(s)/2]) / 2
}

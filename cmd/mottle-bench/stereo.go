package main

import (
	"context"
	"fmt"
	"io"
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
	W, H, step := 1024, 768, 8
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

	t0 := time.Now()
	r2, err := correlate.Run(ctx, imgs[0], imgs[2], co)
	if err != nil {
		return err
	}
	d2 := time.Since(t0).Seconds()
	t0 = time.Now()
	ref, err := stereo.Match(ctx, rig, imgs[0], imgs[1], stereo.Options{Correlate: co})
	if err != nil {
		return err
	}
	dm := time.Since(t0).Seconds()
	t0 = time.Now()
	st, err := ref.Track(ctx, imgs[0], imgs[1], imgs[2], imgs[3])
	if err != nil {
		return err
	}
	dt := time.Since(t0).Seconds()
	base := float64(r2.Stats.OK) / d2
	pm, pt := float64(ref.OK())/dm, float64(st.OK())/dt
	fmt.Fprintf(w, "\nStereo (%d×%d px bench scene, subset 31, step %d, second-order shape, quintic, all cores):\n\n", W, H, step)
	fmt.Fprintf(w, "| stage | points | points/s | ratio to 2D |\n|---|---:|---:|---:|\n")
	fmt.Fprintf(w, "| 2D correlation, left camera (baseline) | %d | %.0f | 1.00 |\n", r2.Stats.OK, base)
	fmt.Fprintf(w, "| stereo match, left → right reference | %d | %.0f | %.2f |\n", ref.OK(), pm, pm/base)
	fmt.Fprintf(w, "| stereo tracking of a deformed pair (both cameras, triangulation) | %d | %.0f | %.2f |\n", st.OK(), pt, pt/base)
	fmt.Fprintf(w, "| a full stereo state (match + tracking) | %d | %.0f | %.2f |\n", st.OK(), float64(st.OK())/(dm+dt), float64(st.OK())/(dm+dt)/base)
	return nil
}

package runner

import (
	"context"
	"fmt"
	"runtime"
	"runtime/debug"
	"testing"

	"github.com/mottledic/mottle/internal/heapwatch"
	"github.com/mottledic/mottle/internal/stereobench"
	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/series3d"
	"github.com/mottledic/mottle/pkg/synth"
)

// measure returns the peak heap of f above the heap before it, in bytes.
func measure(b *testing.B, f func() error) uint64 {
	runtime.GC()
	base := heapwatch.Now()
	stop := make(chan struct{})
	pk := heapwatch.Peak(stop)
	err := f()
	close(stop)
	if err != nil {
		b.Fatal(err)
	}
	peak := <-pk
	return peak - min(peak, base)
}

// BenchmarkStereoMemory measures the memory a stereo job and a frame of a
// stereo series hold while computed (the peak live heap above the decoded
// images, per image pixel) beside a 2D analysis of the left camera in the
// same run: the figures behind the memory budget's charges (see
// pkg/service memory.go). Each includes encoding its results, as the job
// does. 640×480 px, the whole image, subset 31, step 8, one thread.
func BenchmarkStereoMemory(b *testing.B) {
	const w, h = 640, 480
	lc, rc, rig := stereobench.Rig(w, h)
	pat, err := stereobench.Pattern(7, 5)
	if err != nil {
		b.Fatal(err)
	}
	render := func(pl synth.Placement, seed int64) (l, r *imageio.Gray) {
		var out [2]*imageio.Gray
		for k, c := range []synth.Cam{lc, rc} {
			g, _, err := synth.RenderSurface(pat, pl, c, synth.RenderOptions{W: w, H: h, Supersample: 1, Noise: 0.5, Seed: seed + int64(k)})
			if err != nil {
				b.Fatal(err)
			}
			out[k] = g
		}
		return out[0], out[1]
	}
	l0, r0 := render(synth.Placement{Shape: synth.Plane{}}, 1)
	l1, r1 := render(synth.Placement{Shape: synth.Plane{}, Pose: synth.Pose{T: [3]float64{0, 0, 0.5}}}, 3)
	p := series3d.Params{Subset: 31, Step: 8, Threads: 1}
	ctx := context.Background()
	st, err := series3d.New(ctx, rig, l0, r0, series.FrameMeta{}, p)
	if err != nil {
		b.Fatal(err)
	}
	saved := st.State()
	var twoD, job, frame uint64
	for b.Loop() {
		twoD = max(twoD, measure(b, func() error {
			ap := analysis.Defaults()
			ap.Subset, ap.Step, ap.Threads = 31, 8, 1
			_, err := Pipeline{}.Run(ctx, Input{Ref: l0, Def: l1, Params: ap}, nil)
			return err
		}))
		job = max(job, measure(b, func() error {
			f, err := StereoField(ctx, rig, StereoImages{LeftRef: l0, RightRef: r0, LeftDef: l1, RightDef: r1}, StereoParams{Params: p, Deformed: true}, 1)
			if err == nil {
				_, err = EncodeFormats(f, "")
			}
			return err
		}))
		frame = max(frame, measure(b, func() error {
			s, err := series3d.Restore(rig, l0, r0, p, saved)
			if err != nil {
				return err
			}
			fr, _, err := s.Add(ctx, l1, r1, series.FrameMeta{})
			if err != nil {
				return err
			}
			in := stereoInput{Ref: s.Reference(), Frame: s.SpecimenFrame(), State: fr.State, Surface: fr.Surface}
			f, err := in.build(rig, p)
			if err == nil {
				_, err = EncodeFormats(f, "")
			}
			if err == nil {
				_, err = s.MarshalState()
			}
			return err
		}))
	}
	px := float64(w * h)
	b.ReportMetric(float64(twoD)/px, "2D-B/px")
	b.ReportMetric(float64(job)/px, "stereo-B/px")
	b.ReportMetric(float64(frame)/px, "stereo-frame-B/px")
	b.ReportMetric(float64(job)/float64(twoD), "stereo/2D")
}

// BenchmarkAnalysisMemory measures the memory a 2D analysis job holds
// while computed, its results encoded as the job does (the peak heap
// above the two decoded images, per image pixel): the figure behind the
// memory budget's charge of a job (pkg/service memory.go). With the
// collector at GOGC 5 the heap holds little garbage, so its peak is close
// to the live peak; GOGC 100 is the default. Subset 31 and the given
// step on a rendered 4 px speckle, on one and two threads.
func BenchmarkAnalysisMemory(b *testing.B) {
	ctx := context.Background()
	for _, c := range []struct{ size, step int }{{512, 16}, {512, 8}, {1024, 8}} {
		ref, def, err := synth.Pair(synth.PatternOptions{Diameter: 4, Seed: 3}, synth.Translation{U: 2.4, V: -1.7},
			synth.RenderOptions{W: c.size, H: c.size, Bits: 8})
		if err != nil {
			b.Fatal(err)
		}
		for _, threads := range []int{1, 2} {
			for _, gogc := range []int{5, 100} {
				b.Run(fmt.Sprintf("%dpx/step%d/threads%d/gogc%d", c.size, c.step, threads, gogc), func(b *testing.B) {
					defer debug.SetGCPercent(debug.SetGCPercent(gogc))
					var peak uint64
					for b.Loop() {
						peak = max(peak, measure(b, func() error {
							p := analysis.Defaults()
							p.Subset, p.Step = 31, c.step
							_, err := Pipeline{}.Run(ctx, Input{Ref: ref, Def: def, Params: p, Threads: threads}, nil)
							return err
						}))
					}
					b.ReportMetric(float64(peak)/float64(c.size*c.size), "B/px")
				})
			}
		}
	}
}

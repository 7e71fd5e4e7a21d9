package series

import (
	"bytes"
	"context"
	"slices"
	"syscall"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// BenchmarkLive5MP is the live mode's target case: 2448×2048 frames (5
// MP), one 1,000 px extensometer and one 200×200 px gauge, subset 31
// (step 8, the series defaults otherwise: quintic B-splines, prefilter
// σ = 0.8 px). Frames step by 0.1 % strain along x (up to 0.5 % and back),
// each a 12-bit rendering of one speckle pattern. Each frame arrives as
// the bytes of a 16-bit binary PGM (the fast upload format) and is
// decoded in the timed loop: it reports the time from the bytes to the
// answer (decode, correlation and readings) at p50 and p99, the live part
// alone, the decode's share of the p50, the best decode times of the same
// frame as 16-bit PNG, uncompressed 16-bit TIFF and PGM, the CPU time per
// frame, and, as the baseline from the same run, the full field of one
// frame (Tracker.Add on every grid point, all cores).
//
// Run: go test ./pkg/series -run '^$' -bench Live5MP -benchtime 60x
func BenchmarkLive5MP(b *testing.B) {
	const W, H = 2448, 2048
	cx, cy := W/2.0, H/2.0
	var ms []synth.Motion
	for i := 1; i <= 5; i++ {
		e := 0.001 * float64(i)
		ms = append(ms, synth.Affine{F: [2][2]float64{{1 + e, 0}, {0, 1 - 0.3*e}}, CX: cx, CY: cy})
	}
	all := append([]synth.Motion{synth.Identity{}}, ms...)
	var fr []synth.Frame
	for _, m := range all {
		fr = append(fr, synth.Frame{Motion: m})
	}
	pat, err := synth.NewPattern(synth.PatternOptions{Diameter: 4, Seed: 5, Bounds: synth.BoundsForSeries(fr, W, H, 12)})
	if err != nil {
		b.Fatal(err)
	}
	var imgs []*imageio.Gray
	for _, m := range all {
		g, _, err := synth.Render(pat, m, synth.RenderOptions{W: W, H: H, Bits: 12, Supersample: 1, Noise: 1, Seed: 3})
		if err != nil {
			b.Fatal(err)
		}
		imgs = append(imgs, g)
	}
	ref := imgs[0]
	p := Defaults()
	p.Analysis.Subset, p.Analysis.Step = 31, 8
	p.Extensometers = []Extensometer{{Name: "axial", A: [2]float64{cx - 500, cy}, B: [2]float64{cx + 500, cy}}}
	p.Gauges = []Gauge{{Name: "mid", Rect: &[4]float64{cx - 100, cy - 100, cx + 100, cy + 100}, Components: []string{"E11", "E22"}}}

	// Decode times of one frame in three formats.
	var png, tif, pgm bytes.Buffer
	if err := imageio.WritePNG(&png, imgs[3], 16); err != nil {
		b.Fatal(err)
	}
	if err := imageio.WriteTIFF(&tif, imgs[3], 16); err != nil {
		b.Fatal(err)
	}
	if err := imageio.WritePGM(&pgm, imgs[3], 16); err != nil {
		b.Fatal(err)
	}
	decode := func(data []byte) time.Duration {
		var best time.Duration
		for i := range 3 {
			t0 := time.Now()
			if _, err := imageio.Decode(bytes.NewReader(data), imageio.DefaultLimits()); err != nil {
				b.Fatal(err)
			}
			if d := time.Since(t0); i == 0 || d < best {
				best = d
			}
		}
		return best
	}
	dPNG, dTIF, dPGM := decode(png.Bytes()), decode(tif.Bytes()), decode(pgm.Bytes())
	var uploads [][]byte
	for _, g := range imgs {
		var buf bytes.Buffer
		if err := imageio.WritePGM(&buf, g, 16); err != nil {
			b.Fatal(err)
		}
		uploads = append(uploads, buf.Bytes())
	}

	ctx := context.Background()
	l, err := NewLive(ref, FrameMeta{}, p, Options{}, LiveOptions{Full: FullOnRequest})
	if err != nil {
		b.Fatal(err)
	}
	// The sequence 1, 2, …, 5, 4, …, 1, 0, 1, … of strain steps.
	seq := []int{1, 2, 3, 4, 5, 4, 3, 2, 1, 0}
	lat := make([]time.Duration, 0, b.N)
	live := make([]time.Duration, 0, b.N)
	dec := make([]time.Duration, 0, b.N)
	npts := 0
	c0 := cpuTime()
	b.ResetTimer()
	for n := range b.N {
		t0 := time.Now()
		g, err := imageio.Decode(bytes.NewReader(uploads[seq[n%len(seq)]]), imageio.DefaultLimits())
		if err != nil {
			b.Fatal(err)
		}
		t1 := time.Now()
		v, err := l.Frame(ctx, g, FrameMeta{})
		if err != nil {
			b.Fatal(err)
		}
		t2 := time.Now()
		lat, live, dec = append(lat, t2.Sub(t0)), append(live, t2.Sub(t1)), append(dec, t1.Sub(t0))
		npts = v.Points
		if !v.Trusted {
			b.Fatalf("frame %d: not trusted: %+v", n+1, v.Readings)
		}
	}
	b.StopTimer()
	cpu := cpuTime() - c0
	q := func(d []time.Duration, f float64) float64 {
		d = slices.Clone(d)
		slices.Sort(d)
		return float64(d[min(int(f*float64(len(d))), len(d)-1)].Microseconds()) / 1000
	}

	// Baseline: the full field of one frame.
	tr, err := New(ref, FrameMeta{}, p)
	if err != nil {
		b.Fatal(err)
	}
	t0 := time.Now()
	if _, err := tr.Add(ctx, imgs[1], FrameMeta{}); err != nil {
		b.Fatal(err)
	}
	full := time.Since(t0)
	g := tr.st.Grid
	b.ReportMetric(q(lat, 0.5), "p50_ms")
	b.ReportMetric(q(lat, 0.99), "p99_ms")
	b.ReportMetric(q(live, 0.5), "live_p50_ms")
	b.ReportMetric(q(live, 0.99), "live_p99_ms")
	b.ReportMetric(q(dec, 0.5)/q(lat, 0.5), "decode_share_p50")
	b.ReportMetric(float64(cpu.Microseconds())/1000/float64(b.N), "cpu_ms/frame")
	b.ReportMetric(float64(dPNG.Microseconds())/1000, "decode_png16_ms")
	b.ReportMetric(float64(dTIF.Microseconds())/1000, "decode_tiff16_ms")
	b.ReportMetric(float64(dPGM.Microseconds())/1000, "decode_pgm16_ms")
	b.ReportMetric(float64(full.Milliseconds()), "full_field_ms")
	b.ReportMetric(full.Seconds()*1000/q(lat, 0.5), "full/p50")
	b.ReportMetric(float64(npts)/(q(live, 0.5)/1000), "live_points/s")
	b.ReportMetric(float64(g.Nx*g.Ny)/full.Seconds(), "full_points/s")
	b.ReportMetric(float64(npts), "live_points")
}

// cpuTime returns the user + system CPU time of the process so far.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

package series

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
	"sync"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// liveParams are series parameters for the small rendered live tests: one
// extensometer along x and one gauge in the middle of a W×H frame.
func liveParams(w, h float64) Params {
	p := Defaults()
	p.Analysis.Subset, p.Analysis.Step = 21, 8
	cx, cy := w/2, h/2
	p.Extensometers = []Extensometer{{Name: "axial", A: [2]float64{cx - w/3, cy}, B: [2]float64{cx + w/3, cy}}}
	p.Gauges = []Gauge{{Name: "mid", Rect: &[4]float64{cx - w/5, cy - h/5, cx + w/5, cy + h/5}, Components: []string{"E11", "E22"}}}
	return p
}

// TestLiveAgreesWithFullField renders a uniaxial stretch (the invented
// demo law of synth, 0 to 2 % in 8 frames) and checks, frame by frame,
// that each live reading (the extensometer's engineering strain, the
// gauge's mean E11 and E22) agrees with the full-field reading of the same
// frame (same extensometer, same gauge points) to within the live value's
// own predicted standard uncertainty, and that this uncertainty is
// positive and small against the strain (below 1e-3 here).
func TestLiveAgreesWithFullField(t *testing.T) {
	const W, H = 160, 112
	var ms []synth.Motion
	var strains []float64
	for i := 1; i <= 8; i++ {
		e := 0.0025 * float64(i)
		strains = append(strains, e)
		ms = append(ms, law.Motion(e, W/2, H/2))
	}
	ref, imgs := renderFrames(t, W, H, 4, ms, 0)
	p := liveParams(W, H)
	l, err := NewLive(ref, FrameMeta{Name: "ref"}, p, Options{}, LiveOptions{})
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	for n, im := range imgs {
		v, err := l.Frame(ctx, im, FrameMeta{})
		if err != nil {
			t.Fatal(err)
		}
		if v.Index != n+1 || !v.Full {
			t.Fatalf("frame %d: index %d, full due %v", n+1, v.Index, v.Full)
		}
		fr, err := l.FullField(ctx, v.Index, im)
		if err != nil {
			t.Fatal(err)
		}
		full := []float64{fr.Summary.Extensometers[0].Eng, fr.Summary.Gauges[0].Mean, fr.Summary.Gauges[1].Mean}
		if len(v.Readings) != len(full) {
			t.Fatalf("frame %d: %d readings, want %d", n+1, len(v.Readings), len(full))
		}
		for i, r := range v.Readings {
			if !r.Trusted || r.Value == nil || r.Std == nil {
				t.Fatalf("frame %d %s %s: not trusted (%s) or no std", n+1, r.Name, r.Component, r.Reason)
			}
			if !(*r.Std > 0 && *r.Std < 1e-3) {
				t.Errorf("frame %d %s %s: predicted std %g, want in (0, 1e-3)", n+1, r.Name, r.Component, *r.Std)
			}
			if d := math.Abs(*r.Value - full[i]); d > *r.Std {
				t.Errorf("frame %d %s %s: live %.7f, full field %.7f: differ by %.2g > predicted std %.2g",
					n+1, r.Name, r.Component, *r.Value, full[i], d, *r.Std)
			}
		}
		if n == len(imgs)-1 {
			t.Logf("last frame: applied %.4f; live ext %.6f ± %.1e, gauge E11 %.6f ± %.1e; %d points (full grid %d)",
				strains[n], *v.Readings[0].Value, *v.Readings[0].Std, *v.Readings[1].Value, *v.Readings[1].Std, v.Points, l.lat.Nx*l.lat.Ny)
		}
	}
}

// TestLiveRunMatchesSeries runs 200 small frames through a live series,
// the live path on one goroutine and the full field of every frame on
// another (as the CLI and the service do), and checks that every frame
// got its answer, in order, and that the final curve is the one a normal
// series run (Tracker.Add on the same frames) gives.
func TestLiveRunMatchesSeries(t *testing.T) {
	const W, H, nFrames = 72, 64, 200
	var ms []synth.Motion
	for i := 1; i <= 4; i++ {
		e := 0.002 * float64(i)
		ms = append(ms, synth.Affine{F: [2][2]float64{{1 + e, 0}, {0, 1 - 0.3*e}}, CX: W / 2, CY: H / 2, U: 0.3 * float64(i)})
	}
	ref, base := renderFrames(t, W, H, 4, ms, 0)
	// 200 frames cycling through the four rendered motions, with time
	// stamps and loads.
	imgs := make([]*imageio.Gray, nFrames)
	metas := make([]FrameMeta, nFrames)
	for i := range imgs {
		imgs[i] = base[i%len(base)]
		ts, ld := 0.5*float64(i+1), 10*float64(i%len(base))
		metas[i] = FrameMeta{Time: &ts, Load: &ld}
	}
	p := Defaults()
	p.Analysis.Subset, p.Analysis.Step = 15, 6
	p.Analysis.Interpolation, p.Analysis.Prefilter = "cubic", 0
	p.Extensometers = []Extensometer{{Name: "e", A: [2]float64{16, 32}, B: [2]float64{56, 32}}}
	p.Gauges = []Gauge{{Name: "g", Rect: &[4]float64{24, 20, 48, 44}}}
	zero := 0.0
	l, err := NewLive(ref, FrameMeta{Time: &zero}, p, Options{}, LiveOptions{})
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	todo := make(chan int, nFrames)
	var wg sync.WaitGroup
	var fullErr error
	wg.Add(1)
	go func() {
		defer wg.Done()
		for i := range todo {
			if _, err := l.FullField(ctx, i, imgs[i-1]); err != nil && fullErr == nil {
				fullErr = err
			}
		}
	}()
	var got []int
	for i, im := range imgs {
		v, err := l.Frame(ctx, im, metas[i])
		if err != nil {
			t.Fatal(err)
		}
		got = append(got, v.Index)
		if v.Full {
			todo <- v.Index
		}
	}
	close(todo)
	wg.Wait()
	if fullErr != nil {
		t.Fatal(fullErr)
	}
	if len(got) != nFrames {
		t.Fatalf("%d answers, want %d", len(got), nFrames)
	}
	for i, g := range got {
		if g != i+1 {
			t.Fatalf("answer %d has index %d, want %d", i, g, i+1)
		}
	}

	tr, err := New(ref, FrameMeta{Time: &zero}, p)
	if err != nil {
		t.Fatal(err)
	}
	for i, im := range imgs {
		if _, err := tr.Add(ctx, im, metas[i]); err != nil {
			t.Fatal(err)
		}
	}
	var a, b bytes.Buffer
	if err := l.Curve().WriteCSV(&a); err != nil {
		t.Fatal(err)
	}
	if err := tr.Curve().WriteCSV(&b); err != nil {
		t.Fatal(err)
	}
	if la, lb := bytes.Split(a.Bytes(), []byte("\n")), bytes.Split(b.Bytes(), []byte("\n")); len(la) != len(lb) {
		t.Errorf("live curve.csv has %d lines, the series run's %d", len(la), len(lb))
	} else {
		for i := range la {
			if !bytes.Equal(la[i], lb[i]) {
				t.Errorf("curve.csv line %d:\nlive   %s\nseries %s", i, la[i], lb[i])
				break
			}
		}
	}
	ja, _ := json.Marshal(l.Curve())
	jb, _ := json.Marshal(tr.Curve())
	if !bytes.Equal(ja, jb) {
		t.Errorf("live curve JSON differs from the series run's")
	}
	if n := len(l.Curve().Rows); n != nFrames+1 {
		t.Errorf("curve has %d rows, want %d", n, nFrames+1)
	}
}

// TestLiveUntrusted checks that frames whose live values cannot be trusted
// say so instead of giving a number: a frame of another speckle pattern
// (nothing correlates), and a strain jump beyond MaxJump.
func TestLiveUntrusted(t *testing.T) {
	const W, H = 96, 80
	ms := []synth.Motion{synth.Affine{F: [2][2]float64{{1.01, 0}, {0, 0.997}}, CX: W / 2, CY: H / 2}}
	ref, imgs := renderFrames(t, W, H, 4, ms, 0)
	_, other := renderFramesSeed(t, W, H, 4, ms, 0, 99)
	p := liveParams(W, H)
	p.Analysis.Interpolation, p.Analysis.Prefilter = "cubic", 0
	ctx := context.Background()

	l, err := NewLive(ref, FrameMeta{}, p, Options{}, LiveOptions{Full: FullOnRequest})
	if err != nil {
		t.Fatal(err)
	}
	v, err := l.Frame(ctx, other[0], FrameMeta{Name: "wrong pattern"})
	if err != nil {
		t.Fatal(err)
	}
	if v.Trusted || v.Full {
		t.Errorf("wrong pattern: trusted %v, full due %v; want untrusted, not due", v.Trusted, v.Full)
	}
	for _, r := range v.Readings {
		if r.Trusted || r.Value != nil || r.Reason == "" {
			t.Errorf("wrong pattern, %s %s: trusted %v value %v reason %q; want no value and a reason", r.Name, r.Component, r.Trusted, r.Value, r.Reason)
		}
	}
	// The curve row says "no value" too.
	c := l.Curve()
	if x := c.Column("ext_axial_eng")[1]; !math.IsNaN(x) {
		t.Errorf("untrusted frame in the curve: ext_axial_eng %g, want empty", x)
	}
	// The next, good frame is trusted again.
	if v, err = l.Frame(ctx, imgs[0], FrameMeta{}); err != nil {
		t.Fatal(err)
	}
	if !v.Trusted {
		t.Errorf("good frame after a bad one: not trusted: %+v", v.Readings)
	}
	if err := l.Request(2); err != nil {
		t.Fatal(err)
	}
	if !l.Due(2) || l.Due(1) {
		t.Errorf("on request: due(2) %v, due(1) %v; want true, false", l.Due(2), l.Due(1))
	}
	if err := l.Request(5); err == nil {
		t.Error("request of a frame not yet given: no error")
	}

	// A 1 % stretch in one frame is a jump beyond MaxJump = 0.001.
	l, err = NewLive(ref, FrameMeta{}, p, Options{}, LiveOptions{MaxJump: 0.001})
	if err != nil {
		t.Fatal(err)
	}
	if v, err = l.Frame(ctx, ref, FrameMeta{}); err != nil || !v.Trusted {
		t.Fatalf("reference as a frame: %v, trusted %v", err, v.Trusted)
	}
	if v, err = l.Frame(ctx, imgs[0], FrameMeta{}); err != nil {
		t.Fatal(err)
	}
	if r := v.Readings[0]; r.Trusted || r.Reason != ReasonJump {
		t.Errorf("1 %% jump: trusted %v reason %q, want %q", r.Trusted, r.Reason, ReasonJump)
	}
}

// TestLiveErrors: bad options and frames give errors, not panics.
func TestLiveErrors(t *testing.T) {
	const W, H = 96, 80
	ref, _ := renderFrames(t, W, H, 4, []synth.Motion{synth.Identity{}}, 0)
	p := liveParams(W, H)
	p.Analysis.Interpolation, p.Analysis.Prefilter = "cubic", 0
	for _, lo := range []LiveOptions{{Full: "sometimes"}, {EveryN: -2}, {MinValid: 2}, {MaxJump: math.NaN()}} {
		if _, err := NewLive(ref, FrameMeta{}, p, Options{}, lo); err == nil {
			t.Errorf("options %+v: no error", lo)
		}
	}
	bare := p
	bare.Extensometers, bare.Gauges = nil, nil
	if _, err := NewLive(ref, FrameMeta{}, bare, Options{}, LiveOptions{}); err == nil {
		t.Error("no extensometer or gauge: no error")
	}
	l, err := NewLive(ref, FrameMeta{}, p, Options{}, LiveOptions{Full: FullEveryN, EveryN: 2})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := l.Frame(context.Background(), imageio.NewGray(10, 10), FrameMeta{}); err == nil {
		t.Error("frame of the wrong size: no error")
	}
	if _, err := l.FullField(context.Background(), 1, ref); err == nil {
		t.Error("full field of a frame not given: no error")
	}
	v, err := l.Frame(context.Background(), ref, FrameMeta{})
	if err != nil || v.Full {
		t.Errorf("every 2nd: frame 1 due %v (err %v), want not due", v.Full, err)
	}
	if v, _ = l.Frame(context.Background(), ref, FrameMeta{}); !v.Full {
		t.Error("every 2nd: frame 2 not due")
	}
}

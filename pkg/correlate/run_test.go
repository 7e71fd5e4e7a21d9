package correlate

import (
	"cmp"
	"context"
	"encoding/json"
	"errors"
	"math"
	"slices"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
	"github.com/mottledic/mottle/pkg/synth"
)

// Rejected points stay in the grid with their reason: outside a polygon ROI
// with a hole, low contrast on a blank reference patch, and a failed match
// where the deformed image shows something else.
func TestRejectedPointsKeepTheirReason(t *testing.T) {
	m := synth.Translation{U: 1.3, V: 0.6}
	ref, def := pair(t, m, 200, 200, 8, 1, 8)
	for y := 30; y < 80; y++ { // blank in both images
		for x := 120; x < 175; x++ {
			ref.Set(x, y, 90)
			def.Set(x, y, 90)
		}
	}
	other, _ := pair(t, synth.Identity{}, 200, 200, 8, 1, 99)
	for y := 120; y < 175; y++ { // a different pattern in the deformed image
		for x := 120; x < 175; x++ {
			def.Set(x, y, other.At(x, y))
		}
	}
	spec := roi.Spec{
		Polygon: [][2]float64{{5, 5}, {195, 5}, {195, 195}, {5, 195}},
		Holes:   [][][2]float64{{{20, 120}, {70, 120}, {70, 170}, {20, 170}}},
	}
	mask, err := spec.Mask(200, 200)
	if err != nil {
		t.Fatal(err)
	}
	res, err := Run(context.Background(), ref, def, Options{Subset: 21, Step: 6, Mask: mask})
	if err != nil {
		t.Fatal(err)
	}
	count := map[Status]int{}
	for _, p := range res.Points {
		count[p.Status]++
		in := func(x0, y0, x1, y1 float64) bool { return p.X >= x0 && p.X < x1 && p.Y >= y0 && p.Y < y1 }
		switch {
		case in(35, 135, 55, 155) && p.Status != Outside:
			t.Errorf("(%v, %v) inside the hole: status %v", p.X, p.Y, p.Status)
		case in(131, 41, 164, 69) && p.Status != LowContrast:
			t.Errorf("(%v, %v) on the blank patch: status %v", p.X, p.Y, p.Status)
		case in(131, 131, 164, 164) && (p.Status == OK || p.Status == Outside):
			t.Errorf("(%v, %v) on the replaced patch: status %v, ZNCC %.3f", p.X, p.Y, p.Status, p.ZNCC)
		case in(20, 20, 100, 100) && p.Status != OK:
			t.Errorf("(%v, %v) on good texture: status %v", p.X, p.Y, p.Status)
		}
	}
	if len(res.Points) != res.Grid.Len() || count[OK] != res.Stats.OK || count[Outside] != res.Stats.Outside {
		t.Errorf("points %d, grid %d, counts %v, stats %+v", len(res.Points), res.Grid.Len(), count, res.Stats)
	}
	t.Logf("status counts %v", count)
	// Statuses encode by name.
	b, _ := json.Marshal(Outside)
	var st Status
	if err := json.Unmarshal([]byte(`"low_zncc"`), &st); err != nil || st != LowZNCC || string(b) != `"outside"` {
		t.Errorf("status JSON: %s, %v, %v", b, st, err)
	}
}

// Cancellation stops a run with the context's error; progress is reported
// monotonically up to done = total.
func TestCancelAndProgress(t *testing.T) {
	ref, def := pair(t, synth.Translation{U: 0.4, V: 0.2}, 160, 160, 8, 1, 10)
	var calls, last, lastTotal int
	mono := true
	res, err := Run(context.Background(), ref, def, Options{Subset: 21, Step: 5, Progress: func(done, total int) {
		calls++
		if done < last {
			mono = false
		}
		last, lastTotal = done, total
	}})
	if err != nil {
		t.Fatal(err)
	}
	if calls < 3 || !mono || last != lastTotal || lastTotal != res.Stats.Total-res.Stats.Outside {
		t.Errorf("progress: %d calls, monotonic %v, last %d/%d, points %d", calls, mono, last, lastTotal, res.Stats.Total)
	}
	ctx, cancel := context.WithCancel(context.Background())
	_, err = Run(ctx, ref, def, Options{Subset: 21, Step: 5, Progress: func(done, total int) {
		if done > total/4 {
			cancel()
		}
	}})
	if !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled run: err = %v, want context.Canceled", err)
	}
	if _, err := Run(ctx, ref, def, Options{}); !errors.Is(err, context.Canceled) {
		t.Errorf("run with a cancelled context: err = %v", err)
	}
}

func TestBadInputs(t *testing.T) {
	g := imageio.NewGray(64, 64)
	small := imageio.NewGray(10, 10)
	nan := imageio.NewGray(64, 64)
	nan.Pix[100] = float32(math.NaN())
	wrongMask := roi.Full(32, 32)
	cases := []struct {
		name     string
		ref, def *imageio.Gray
		opt      Options
		want     string
	}{
		{"nil", nil, g, Options{}, "nil"},
		{"sizes", g, imageio.NewGray(64, 65), Options{}, "same size"},
		{"small", small, small, Options{}, "subset size"},
		{"nan", nan, g, Options{}, "finite"},
		{"mask", g, g, Options{Mask: wrongMask}, "mask"},
		{"seed", g, g, Options{Seeds: [][2]int{{-3, 5}}}, "seed"},
		{"start", g, g, Options{Start: make([]Point, 3)}, "Start"},
		{"subset", g, g, Options{Subset: 30}, "odd"},
	}
	for _, c := range cases {
		_, err := Run(context.Background(), c.ref, c.def, c.opt)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: err = %v, want one mentioning %q", c.name, err, c.want)
		}
	}
	err := Options{Subset: 4, Step: -1, Shape: 3, Interp: 4, Prefilter: -1, Search: -2, MinZNCC: 2, MaxIter: -1, Tol: 5, Threads: -1, Noise: -1}.Validate()
	if err == nil || len(err.(interface{ Unwrap() []error }).Unwrap()) != 11 {
		t.Errorf("Validate should report 11 problems, got %v", err)
	}
	if err := (Options{}).Validate(); err != nil {
		t.Errorf("zero Options invalid: %v", err)
	}
	if d := Defaults(); d.Subset != 31 || d.Step != 8 || d.Shape != First || d.MinZNCC != 0.8 {
		t.Errorf("Defaults() = %+v", d)
	}
	// A blank image is measured as low contrast everywhere, not an error or a panic.
	res, err := Run(context.Background(), g, g, Options{})
	if err != nil || res.Stats.OK != 0 || res.Stats.LowContrast == 0 {
		t.Errorf("blank images: %v, %+v", err, res.Stats)
	}
}

// Starting from a previous result (as a series does frame to frame) gives
// an accurate answer without a seed search; RunPoints at off-grid positions
// agrees with the closed-form displacement of the applied affine map.
func TestStartGuessesAndRunPoints(t *testing.T) {
	m0 := synth.Affine{F: [2][2]float64{{1.004, 0.001}, {0, 0.998}}, CX: 100, CY: 100, U: 2.2, V: 1.1}
	m1 := synth.Affine{F: [2][2]float64{{1.006, 0.001}, {0, 0.997}}, CX: 100, CY: 100, U: 2.6, V: 1.3}
	imgs := renderPattern(t, synth.PatternOptions{Diameter: 5, Kind: synth.Gaussian, Seed: 12},
		synth.RenderOptions{W: 200, H: 200, Bits: 16}, 20, synth.Identity{}, m0, m1)
	opt := Options{Subset: 25, Step: 8}
	r0, err := Run(context.Background(), imgs[0], imgs[1], opt)
	if err != nil {
		t.Fatal(err)
	}
	opt.Start = r0.Points
	r1, err := Run(context.Background(), imgs[0], imgs[2], opt)
	if err != nil {
		t.Fatal(err)
	}
	opt.Start = nil
	fresh, err := Run(context.Background(), imgs[0], imgs[2], opt)
	if err != nil {
		t.Fatal(err)
	}
	rms, _, n := truthErrors(r1, m1)
	if len(r1.Seeds) != 0 || n != fresh.Stats.OK || rms > 0.002 {
		t.Errorf("from Start: %d seeds, %d points (without Start %d), RMS %.4f px", len(r1.Seeds), n, fresh.Stats.OK, rms)
	}
	pts := [][2]float64{{60.25, 70.5}, {120.7, 99.1}, {150, 40.3}, {3, 3}}
	var guesses [][12]float64
	for range pts {
		var g [12]float64
		g[U], g[V] = 2, 1
		guesses = append(guesses, g)
	}
	for _, gs := range [][][12]float64{guesses, nil} {
		res, err := RunPoints(context.Background(), imgs[0], imgs[2], pts, gs, Options{Subset: 25})
		if err != nil {
			t.Fatal(err)
		}
		for i, p := range res.Points[:3] {
			x, y := m1.Map(pts[i][0], pts[i][1])
			if p.Status != OK || math.Hypot(p.P[U]-(x-pts[i][0]), p.P[V]-(y-pts[i][1])) > 0.005 {
				t.Errorf("RunPoints %v (guesses %v): status %v, u %.4f v %.4f, want %.4f %.4f", pts[i], gs != nil, p.Status, p.P[U], p.P[V], x-pts[i][0], y-pts[i][1])
			}
		}
		if res.Points[3].Status != Outside {
			t.Errorf("point at the image corner: status %v, want outside", res.Points[3].Status)
		}
	}
}

// EstimateNoise recovers the σ of two independently noisy renderings of
// the same still pattern: Var(a − b) = 2σ² (common practice).
func TestEstimateNoise(t *testing.T) {
	imgs := renderPattern(t, synth.PatternOptions{Diameter: 4, Seed: 3}, synth.RenderOptions{W: 128, H: 128, Bits: 16, Noise: 50}, 8, synth.Identity{}, synth.Identity{})
	s, err := EstimateNoise(imgs[0], imgs[1], nil)
	if err != nil || math.Abs(s/50-1) > 0.05 {
		t.Errorf("EstimateNoise = %v, %v; want 50 ± 5 %%", s, err)
	}
}

// seedCandidates picks the 25 pending points nearest the centroid of the
// pending points, nearest first, ties by index (then reorders them by
// texture): the same set as sorting every pending point. On the whole grid
// the distances tie in groups of four or eight, so the 25th place is shared
// and the index decides; a second case leaves an irregular pending set.
func TestSeedCandidatesNearest(t *testing.T) {
	ref, def := pair(t, synth.Translation{U: 1.5, V: -0.5}, 160, 128, 8, 1, 3)
	tied := false
	for _, irregular := range []bool{false, true} {
		r, err := newRun(context.Background(), ref, def, Options{Subset: 15, Step: 4, Threads: 1}, tuning{})
		if err != nil {
			t.Fatal(err)
		}
		defer r.stop()
		if err := r.setupGrid(); err != nil {
			t.Fatal(err)
		}
		for k := range r.state {
			if irregular && r.state[k] == stPending && (k%7 == 0 || k%11 == 3) {
				r.state[k] = stDone
			}
		}
		var cx, cy, n float64
		var all []int
		for k, s := range r.state {
			if s == stPending {
				cx += r.pts[k].X
				cy += r.pts[k].Y
				n++
				all = append(all, k)
			}
		}
		cx, cy = cx/n, cy/n
		d := func(k int) float64 {
			dx, dy := r.pts[k].X-cx, r.pts[k].Y-cy
			return dx*dx + dy*dy
		}
		slices.SortFunc(all, func(a, b int) int {
			if c := cmp.Compare(d(a), d(b)); c != 0 {
				return c
			}
			return cmp.Compare(a, b)
		})
		tied = tied || d(all[24]) == d(all[25])
		want := slices.Clone(all[:25])
		got := r.seedCandidates(-1)
		slices.Sort(want)
		slices.Sort(got)
		if !slices.Equal(got, want) {
			t.Errorf("irregular %v: candidates %v, want the 25 nearest %v", irregular, got, want)
		}
	}
	if !tied {
		t.Error("no case has a tie at the 25th place: the test does not check the order of ties")
	}
}

package series

import (
	"context"
	"encoding/json"
	"testing"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// TestMaskImage: a series started with a mask image (the left half of the
// image) measures only grid points whose subset lies inside it, and a
// tracker restored from the JSON state, without the mask, keeps it.
func TestMaskImage(t *testing.T) {
	const W, H = 128, 96
	var ms []synth.Motion
	for n := 1; n <= 2; n++ {
		ms = append(ms, synth.Affine{F: [2][2]float64{{1 + 0.003*float64(n), 0}, {0, 1}}, CX: 64, CY: 48, U: 0.4 * float64(n)})
	}
	ref, imgs := renderFrames(t, W, H, 3, ms, 0)
	mask := imageio.NewGray(W, H)
	for y := range H {
		for x := range W / 2 {
			mask.Pix[y*mask.Stride+x] = 1 // any level above half the maximum is inside
		}
	}
	p := Defaults()
	p.Analysis = analysis.Defaults()
	p.Analysis.Subset, p.Analysis.Step = 15, 8
	tr, err := NewWith(ref, FrameMeta{}, p, Options{Mask: mask})
	if err != nil {
		t.Fatal(err)
	}
	check := func(fr *Frame, what string) {
		in, out := 0, 0
		for k, st := range fr.Status {
			X := fr.Grid.X0 + float64(k%fr.Grid.Nx)*fr.Grid.Step
			inside := X+7 < W/2 // the whole 15 px subset left of x = 63.5
			switch {
			case st == "ok" && !inside:
				t.Fatalf("%s: point %d at X = %g measured outside the mask", what, k, X)
			case st == "ok":
				in++
			default:
				out++
			}
		}
		if in == 0 || out == 0 {
			t.Errorf("%s: %d points inside, %d outside; want both", what, in, out)
		}
	}
	fr, err := tr.Add(context.Background(), imgs[0], FrameMeta{})
	if err != nil {
		t.Fatal(err)
	}
	check(fr, "frame 1")
	b, err := json.Marshal(tr.State())
	if err != nil {
		t.Fatal(err)
	}
	var st State
	if err := json.Unmarshal(b, &st); err != nil {
		t.Fatal(err)
	}
	if st.Mask == nil {
		t.Fatal("the state does not hold the mask")
	}
	tr2, err := Restore(ref, imgs[0], st)
	if err != nil {
		t.Fatal(err)
	}
	fr2, err := tr2.Add(context.Background(), imgs[1], FrameMeta{})
	if err != nil {
		t.Fatal(err)
	}
	check(fr2, "frame 2 after restore")
	if _, err := NewWith(ref, FrameMeta{}, p, Options{Mask: imageio.NewGray(W, H)}); err == nil {
		t.Error("an all-black mask was accepted")
	}
	if _, err := NewWith(ref, FrameMeta{}, p, Options{Mask: imageio.NewGray(W-1, H)}); err == nil {
		t.Error("a mask of the wrong size was accepted")
	}
}

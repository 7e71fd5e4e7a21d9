package correlate

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/mottledic/mottle/pkg/synth"
)

// The FFT path of the integer search computes the same ZNCC at every shift
// as the direct dot products (the definition, Pan, Xie & Wang 2010), to
// rounding, and so finds the same shift: for templates cut from a speckle
// image at a known offset, near the image border (clipped searches),
// with radii on both sides of the switch between the paths, and for a
// template of noise that matches nowhere well. Both paths give the same
// bits on any number of threads.
func TestSearchFFTMatchesDirect(t *testing.T) {
	m := synth.Translation{U: 3, V: -5}
	ref, def := pair(t, m, 200, 160, 8, 1, 4)
	rng := rand.New(rand.NewPCG(1, 2))
	cases := []struct {
		name           string
		half, x, y, r  int
		noise          bool
		wantDU, wantDV int
	}{
		{"centre r40", 15, 100, 80, 40, false, 3, -5},
		{"centre r12", 10, 100, 80, 12, false, 3, -5},
		{"corner r40 (clipped)", 10, 20, 20, 40, false, 3, -5},
		{"right edge r30 (clipped)", 15, 180, 100, 30, false, 3, -5},
		{"small r6", 15, 90, 70, 6, false, 3, -5},
		{"noise template r25", 12, 100, 80, 25, true, 0, 0},
	}
	paths := map[bool]int{}
	for _, c := range cases {
		side := 2*c.half + 1
		tm := make([]float64, side*side)
		var s float64
		for j := 0; j < side; j++ {
			for i := 0; i < side; i++ {
				v := float64(ref.At(c.x-c.half+i, c.y-c.half+j))
				if c.noise {
					v = rng.Float64()
				}
				tm[j*side+i] = v
				s += v
			}
		}
		var ss float64
		for k := range tm {
			tm[k] -= s / float64(len(tm))
			ss += tm[k] * tm[k]
		}
		for k := range tm {
			tm[k] /= math.Sqrt(ss)
		}
		want, _ := searchWith(context.Background(), def, tm, c.half, c.x, c.y, c.r, 1, true)
		got, fft := searchWith(context.Background(), def, tm, c.half, c.x, c.y, c.r, 1, false)
		paths[fft]++
		// The FFT path splits its transforms over threads; the same
		// transforms in any order give the same bits.
		for _, th := range []int{2, 3} {
			if g, _ := searchWith(context.Background(), def, tm, c.half, c.x, c.y, c.r, th, false); g != got {
				t.Errorf("%s: %d threads found %+v, one thread %+v", c.name, th, g, got)
			}
		}
		if !want.ok || got.du != want.du || got.dv != want.dv || math.Abs(got.zncc-want.zncc) > 1e-9 {
			t.Errorf("%s: FFT path found (%d, %d) ZNCC %.12f, direct (%d, %d) %.12f", c.name, got.du, got.dv, got.zncc, want.du, want.dv, want.zncc)
		}
		if !c.noise && (want.du != c.wantDU || want.dv != c.wantDV || want.zncc < 0.9) {
			t.Errorf("%s: direct search found (%d, %d) ZNCC %.3f, want (%d, %d)", c.name, want.du, want.dv, want.zncc, c.wantDU, c.wantDV)
		}
	}
	if paths[true] < 3 || paths[false] < 1 {
		t.Errorf("cases took the FFT path %d times and the direct one %d times: the test must exercise both", paths[true], paths[false])
	}
}

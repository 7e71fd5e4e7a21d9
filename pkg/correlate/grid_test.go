package correlate

import (
	"context"
	"math"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// The sliding column sums give bitwise the standard deviation that
// subsetStd sums subset by subset, for integer grey levels of 8 and 16
// bits, grid steps shorter and longer than the subset (the sums moved or
// started again) and rows visited out of order; an image with a fraction
// (here a Gaussian prefilter) is detected and takes subsetStd.
func TestSliderMatchesSubsetStd(t *testing.T) {
	for _, c := range []struct {
		bits, step, subset int
	}{{8, 5, 21}, {16, 3, 7}, {8, 30, 21}, {12, 21, 21}} {
		ref, _ := pair(t, synth.Translation{U: 0.3}, 120, 90, c.bits, 1, 4)
		r, err := newRun(context.Background(), ref, ref, Options{Subset: c.subset, Step: c.step, Threads: 2}, tuning{})
		if err != nil {
			t.Fatal(err)
		}
		r.stop()
		if !r.refInt {
			t.Fatalf("%d-bit image not seen as integer grey levels", c.bits)
		}
		if err := r.layout(); err != nil {
			t.Fatal(err)
		}
		g, m := r.grid, r.m
		sl := newSlider(r.ref, g, m)
		for _, j := range []int{0, 1, 2, g.Ny - 1, 1, g.Ny / 2, g.Ny/2 + 1} {
			_, y := g.At(0, j)
			sl.moveTo(y)
			for i := 0; i < g.Nx; i++ {
				x, _ := g.At(i, j)
				got, want := sl.std(i*g.Step), subsetStd(r.ref, x, y, m)
				if math.Float64bits(got) != math.Float64bits(want) {
					t.Fatalf("%d bits, step %d, subset %d: point (%d, %d): sliding std %v, subsetStd %v", c.bits, c.step, c.subset, i, j, got, want)
				}
			}
		}
	}
	ref, _ := pair(t, synth.Translation{U: 0.3}, 60, 60, 8, 1, 4)
	for _, o := range []Options{{Subset: 21, Prefilter: 0.8}, {Subset: 21}} {
		g := ref
		if o.Prefilter == 0 {
			g = imageio.NewGray(60, 60)
			copy(g.Pix, ref.Pix)
			g.Pix[7] = 1e6 // an integer too large for exact sums of squares
		}
		r, err := newRun(context.Background(), g, g, o, tuning{})
		if err != nil {
			t.Fatal(err)
		}
		r.stop()
		if r.refInt {
			t.Errorf("prefilter %v: image taken for small integer grey levels", o.Prefilter)
		}
	}
}

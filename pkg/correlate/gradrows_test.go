package correlate

import (
	"context"
	"testing"

	"github.com/mottledic/mottle/pkg/roi"
	"github.com/mottledic/mottle/pkg/synth"
)

// A run samples the reference gradients only on the rows its grid's
// subsets span (gradRows); its points must be bitwise those of a run that
// samples every row, for regions of interest in the middle, at the top and
// at the bottom edge of the image, first and second order. A range one row
// short on either side changes the points.
func TestGradientRowsOfTheGrid(t *testing.T) {
	m := synth.Affine{F: [2][2]float64{{1.01, 0.003}, {-0.002, 0.995}}, CX: 80, CY: 70, U: 1.3, V: -0.8}
	ref, def := pair(t, m, 160, 140, 8, 1, 5)
	for _, c := range []struct {
		name string
		rect [4]int
		opt  Options
	}{
		{"middle", [4]int{40, 50, 120, 95}, Options{Subset: 21, Step: 6}},
		{"top", [4]int{10, 0, 150, 40}, Options{Subset: 17, Step: 5, Shape: Second}},
		{"bottom", [4]int{0, 100, 90, 140}, Options{Subset: 21, Step: 7}},
		{"whole", [4]int{0, 0, 160, 140}, Options{Subset: 25, Step: 9, Shape: Second}},
	} {
		mask, err := roi.Spec{Rect: &c.rect}.Mask(ref.W, ref.H)
		if err != nil {
			t.Fatal(err)
		}
		o := c.opt
		o.Mask, o.Threads = mask, 2
		got, err := runWith(context.Background(), ref, def, o, tuning{})
		if err != nil {
			t.Fatal(err)
		}
		want, err := runWith(context.Background(), ref, def, o, tuning{allGrads: true})
		if err != nil {
			t.Fatal(err)
		}
		if got.Stats.OK < 10 {
			t.Fatalf("%s: %d points OK: the case tests nothing", c.name, got.Stats.OK)
		}
		a, b := pointBits(got.Points), pointBits(want.Points)
		if len(a) != len(b) {
			t.Fatalf("%s: %d values, want %d", c.name, len(a), len(b))
		}
		for i := range a {
			if a[i] != b[i] {
				t.Fatalf("%s: value %d differs from the run with gradients on every row", c.name, i)
			}
		}
	}
}

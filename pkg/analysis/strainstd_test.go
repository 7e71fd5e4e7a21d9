package analysis

import (
	"context"
	"math"
	"testing"

	"github.com/mottledic/mottle/pkg/synth"
)

// TestStrainStdMatchesScatter: on static pairs rendered by pkg/synth (no
// motion, independent camera noise of σ = 2 grey levels in each image),
// every strain value is an error, so the spread of E11, E22 and E12 over
// the points is what std_E11, std_E22 and std_E12 predict. Their RMS must
// match the measured std within 0.8–1.3 for strain windows of 5 and 9
// points. The prediction propagates the displacement std through the
// strain fit with the correlation of overlapping subsets (first-order
// propagation with correlated inputs, JCGM 100:2008, "Guide to the
// expression of uncertainty in measurement", 5.2); as independent points
// it was 0.38–0.57 of the scatter.
func TestStrainStdMatchesScatter(t *testing.T) {
	const w, h = 320, 320
	po := synth.PatternOptions{Diameter: 4, EdgeBlur: 1, Seed: 21}
	ref, def, err := synth.Pair(po, nil, synth.RenderOptions{W: w, H: h, Noise: 2, Seed: 3})
	if err != nil {
		t.Fatal(err)
	}
	for _, win := range []int{5, 9} {
		p := Defaults()
		p.Subset, p.Step, p.StrainWindow = 31, 8, win
		f, err := Run(context.Background(), ref, def, p, nil)
		if err != nil {
			t.Fatal(err)
		}
		for _, q := range []string{"E11", "E22", "E12"} {
			v, _ := f.Get(q)
			s, _ := f.Get("std_" + q)
			var n int
			var sum, sum2, pred2 float64
			for k := range v {
				if math.IsNaN(v[k]) || math.IsNaN(s[k]) {
					continue
				}
				sum += v[k]
				sum2 += v[k] * v[k]
				pred2 += s[k] * s[k]
				n++
			}
			if n < 500 {
				t.Fatalf("window %d, %s: %d values, want at least 500", win, q, n)
			}
			mean := sum / float64(n)
			got := math.Sqrt(sum2/float64(n) - mean*mean)
			pred := math.Sqrt(pred2 / float64(n))
			r := pred / got
			t.Logf("window %d, %s: scatter %.3g, predicted %.3g, ratio %.2f (%d points)", win, q, got, pred, r, n)
			if !(r > 0.8 && r < 1.3) {
				t.Errorf("window %d, %s: predicted std %.3g for a scatter of %.3g (ratio %.2f): want 0.8–1.3", win, q, pred, got, r)
			}
		}
	}
}

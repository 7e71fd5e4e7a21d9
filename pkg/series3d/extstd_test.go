package series3d

import (
	"context"
	"fmt"
	"math"
	"testing"

	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/synth"
)

// TestExtensometerStd: three static pairs after the reference (the
// specimen unmoved, new camera noise) make every extensometer strain an
// error, so the RMS of the readings over the extensometers and pairs is
// what their predicted std (ext_<name>_eng_std) says: first-order
// propagation of the 3D displacement std at the two ends (JCGM 100:2008,
// "Guide to the expression of uncertainty in measurement", 5.1). The ends
// take their neighbours' std interpolated like the positions, an upper
// bound for correlated neighbours (measured 1.71× the scatter here, with
// subsets of 31 px on a 16 px grid), so the ratio must lie within 0.8–2.2:
// never understated, and not wildly overstated.
func TestExtensometerStd(t *testing.T) {
	p0, err := synth.NewPattern(synth.PatternOptions{Diameter: 7, Seed: 9, Bounds: synth.Rect{X0: -600, Y0: -450, X1: 600, Y1: 450}})
	if err != nil {
		t.Fatal(err)
	}
	pat := scaled{P: p0}
	_, _, rg := rig()
	ctx := context.Background()
	p := withROI(t, Params{Subset: 31, Step: 16})
	// Eight extensometers of 60 px in the ROI, horizontal and vertical in turn.
	for k := range 8 {
		x, y := float64(roiRect.Min.X+40+(k%4)*60), float64(roiRect.Min.Y+40+(k/4)*80)
		e := series.Extensometer{Name: fmt.Sprintf("e%d", k), A: [2]float64{x, y}, B: [2]float64{x + 60, y}}
		if k%2 == 1 {
			e.B = [2]float64{x, y + 60}
		}
		p.Extensometers = append(p.Extensometers, e)
	}
	l0, r0 := render(t, pat, 0, 0)
	s, err := New(ctx, rg, l0, r0, series.FrameMeta{Name: "ref"}, p)
	if err != nil {
		t.Fatal(err)
	}
	for k, seed := range []int64{301, 403, 505} {
		l, r := renderAt(t, pat, placement(0, 0), seed)
		if _, _, err := s.Add(ctx, l, r, series.FrameMeta{Name: fmt.Sprintf("static%d", k+1)}); err != nil {
			t.Fatal(err)
		}
	}
	c := s.Curve()
	var got2, pred2 float64
	n := 0
	for _, e := range p.Extensometers {
		eng, sd := c.Column("ext_"+e.Name+"_eng"), c.Column("ext_"+e.Name+"_eng_std")
		for i := 1; i < len(eng); i++ {
			if math.IsNaN(eng[i]) || !(sd[i] > 0) {
				t.Fatalf("%s, pair %d: strain %v, std %v: want both", e.Name, i, eng[i], sd[i])
			}
			got2 += eng[i] * eng[i]
			pred2 += sd[i] * sd[i]
			n++
		}
	}
	got, pred := math.Sqrt(got2/float64(n)), math.Sqrt(pred2/float64(n))
	t.Logf("extensometer strain: scatter %.3g, predicted %.3g, ratio %.2f (%d readings)", got, pred, pred/got, n)
	if r := pred / got; !(r > 0.8 && r < 2.2) {
		t.Errorf("predicted extensometer strain std %.3g for a scatter of %.3g (ratio %.2f): want 0.8–2.2", pred, got, r)
	}
}

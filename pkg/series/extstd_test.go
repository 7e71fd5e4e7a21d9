package series

import (
	"context"
	"fmt"
	"math"
	"testing"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// staticFrames renders n frames of a static specimen (the reference
// first) at w×h px, speckles of 4 px from pattern seed patSeed, sensor
// noise σ = 3 grey levels from noise seed noiseSeed.
func staticFrames(t *testing.T, w, h, n int, patSeed, noiseSeed int64) []*imageio.Gray {
	t.Helper()
	pat, err := synth.NewPattern(synth.PatternOptions{Diameter: 4, Seed: patSeed, Bounds: synth.ImageRect(w, h, 12)})
	if err != nil {
		t.Fatal(err)
	}
	var imgs []*imageio.Gray
	err = synth.RenderSeries(context.Background(), pat, synth.StaticSeries(nil, n, 1, 0), synth.RenderOptions{W: w, H: h, Noise: 3, Seed: noiseSeed},
		func(_ synth.Frame, g *imageio.Gray, _ synth.Report) error {
			imgs = append(imgs, g)
			return nil
		})
	if err != nil {
		t.Fatal(err)
	}
	return imgs
}

// TestExtensometerStd: on static frames rendered by pkg/synth (no motion,
// sensor noise σ = 3 grey levels), every extensometer strain is an error,
// so the RMS of the readings over the extensometers and frames is what
// their predicted std (ext_<name>_eng_std) says. The prediction is
// first-order propagation of the displacement std at the two ends (JCGM
// 100:2008, "Guide to the expression of uncertainty in measurement", 5.1)
// from the correlator's per-point std (Wang, Li, Tong & Ruan 2007, Exp.
// Mech. 47:701). 12 extensometers × 6 frames, sharing one reference
// image: the ratio must lie within 0.7–1.5 (measured 1.08; 1.24 when the
// ends took the mean std of their neighbours, ignoring how much of their
// subsets the neighbours share).
func TestExtensometerStd(t *testing.T) {
	imgs := staticFrames(t, 256, 256, 7, 8, 4)
	p := Defaults()
	p.Analysis = analysis.Defaults()
	p.Analysis.Subset, p.Analysis.Step = 21, 8
	// Short extensometers in a 4×3 lattice, horizontal and vertical in
	// turn, 60 px long: their ends share no subset pixels with each other.
	for k := range 12 {
		x, y := 40+float64(k%4)*56, 40+float64(k/4)*60
		e := Extensometer{Name: fmt.Sprintf("e%d", k), A: [2]float64{x, y}, B: [2]float64{x + 60, y}}
		if k%2 == 1 {
			e.B = [2]float64{x, y + 60}
		}
		p.Extensometers = append(p.Extensometers, e)
	}
	tr, err := New(imgs[0], FrameMeta{}, p)
	if err != nil {
		t.Fatal(err)
	}
	var got2, pred2 float64
	n := 0
	for _, im := range imgs[1:] {
		if _, err := tr.Add(context.Background(), im, FrameMeta{}); err != nil {
			t.Fatal(err)
		}
	}
	c := tr.Curve()
	for _, e := range p.Extensometers {
		eng, sd := c.Column("ext_"+e.Name+"_eng"), c.Column("ext_"+e.Name+"_eng_std")
		for i := 1; i < len(eng); i++ { // row 0 is the reference
			if math.IsNaN(eng[i]) || !(sd[i] > 0) {
				t.Fatalf("%s, frame %d: strain %v, std %v: want both", e.Name, i, eng[i], sd[i])
			}
			got2 += eng[i] * eng[i]
			pred2 += sd[i] * sd[i]
			n++
		}
	}
	got, pred := math.Sqrt(got2/float64(n)), math.Sqrt(pred2/float64(n))
	t.Logf("extensometer strain: scatter %.3g, predicted %.3g, ratio %.2f (%d readings)", got, pred, pred/got, n)
	if r := pred / got; !(r > 0.7 && r < 1.5) {
		t.Errorf("predicted extensometer strain std %.3g for a scatter of %.3g (ratio %.2f): want 0.7–1.5", pred, got, r)
	}
}

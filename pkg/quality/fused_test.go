package quality

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
)

// Measure takes the Sobel gradients and the noise estimate from one pass
// over images of up to 1<<22 px; its mean gradient, edge width and noise
// must be those of sobelStats and NoiseFromImage bit for bit: 8-bit levels
// with clipped pixels, 16-bit levels, non-integer levels, a masked ROI.
func TestMeasureOnePassGradients(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	mk := func(w, h int, f func() float32) *imageio.Gray {
		g := &imageio.Gray{W: w, H: h, Stride: w + 3, Pix: make([]float32, (w+3)*h)}
		for i := range g.Pix {
			g.Pix[i] = f()
		}
		return g
	}
	eight := mk(70, 50, func() float32 { return float32(min(255, max(0, int(rng.NormFloat64()*60+128)))) })
	eight.Bits = 8
	sixteen := mk(40, 61, func() float32 { return float32(rng.IntN(4096) * 16) })
	sixteen.Bits = 16
	real := mk(33, 33, func() float32 { return float32(rng.Float64()*3e-3 + 1e-4) })
	mask, err := (&roi.Spec{Rect: &[4]int{5, 4, 60, 41}}).Mask(eight.W, eight.H)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name string
		g    *imageio.Gray
		mask *roi.Mask
	}{{"8-bit", eight, nil}, {"16-bit", sixteen, nil}, {"real", real, nil}, {"masked", eight, mask}} {
		m, err := Measure(c.g, c.mask)
		if err != nil {
			t.Fatal(err)
		}
		mean, p99 := sobelStats(c.g, c.mask)
		noise, err := NoiseFromImage(c.g, c.mask)
		if err != nil {
			t.Fatal(err)
		}
		_, _, lo, hi := imageio.Stats(c.g)
		_, p99r := sobelOf(responses(c.g, c.mask, lo, hi, true))
		same := func(a, b float64) bool { return math.Float64bits(a) == math.Float64bits(b) }
		if !same(m.MeanGradient, mean) || !same(p99r, p99) || !same(m.Noise, noise) {
			t.Errorf("%s: gradient %v, p99 %v, noise %v; want %v, %v, %v", c.name, m.MeanGradient, p99r, m.Noise, mean, p99, noise)
		}
		if p99 == 0 || math.IsNaN(mean) || math.IsNaN(noise) {
			t.Errorf("%s: degenerate test image: p99 %v, mean %v, noise %v", c.name, p99, mean, noise)
		}
	}
}

package synth

import "testing"

func benchRender(b *testing.B, m Motion, workers int) {
	po := PatternOptions{Diameter: 4, Seed: 1}
	p, err := PatternFor(po, m, 512, 512)
	if err != nil {
		b.Fatal(err)
	}
	ro := RenderOptions{W: 512, H: 512, Noise: 2, Workers: workers}
	b.ResetTimer()
	for range b.N {
		if _, _, err := Render(p, m, ro); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkRenderAffine512 renders a 512×512 image, 4×4 samples per pixel, one core.
func BenchmarkRenderAffine512(b *testing.B) {
	benchRender(b, Affine{F: [2][2]float64{{1.01, 0.002}, {-0.003, 0.99}}, CX: 256, CY: 256, U: 0.3}, 1)
}

// BenchmarkRenderHole512 renders the Kirsch field (Newton inverse per sample), one core.
func BenchmarkRenderHole512(b *testing.B) {
	benchRender(b, Hole{E: 70000, Nu: 0.33, Radius: 50, Stress: 350, MMPerPx: 0.01, CX: 256, CY: 256}, 1)
}

// BenchmarkRenderStar512 renders the star field, one core.
func BenchmarkRenderStar512(b *testing.B) {
	benchRender(b, Star{Amplitude: 0.5, PeriodMin: 10, PeriodMax: 300, X0: 0, X1: 511, Y0: 256}, 1)
}

// BenchmarkNewPattern draws the pattern for a 512×512 image.
func BenchmarkNewPattern(b *testing.B) {
	for range b.N {
		if _, err := NewPattern(PatternOptions{Diameter: 4, Seed: 1, Bounds: ImageRect(512, 512, 10)}); err != nil {
			b.Fatal(err)
		}
	}
}

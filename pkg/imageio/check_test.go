package imageio

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestCheckContrastShortcut checks that CheckContrast, which may decide
// from the first rows of an image (the sum of squared deviations from a
// set's own mean is the least over any centre: Σ(v−c)² = Σ(v−m)² +
// n(m−c)², an elementary identity), gives the same answer, message and
// all, as the decision from the whole image's statistics, on images near
// and far from MinContrast, with the difference inside and outside the
// rows it reads, NaN and infinite pixels, windows and tiny images; and
// that it takes the shortcut on a speckle pattern.
func TestCheckContrastShortcut(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 5))
	fill := func(w, h int, f func(x, y int) float32) *Gray {
		g := NewGray(w, h)
		for y := range h {
			for x := range w {
				g.Pix[y*w+x] = f(x, y)
			}
		}
		return g
	}
	noise := func(w, h int, mean, std float64) *Gray {
		return fill(w, h, func(int, int) float32 { return float32(mean + std*rng.NormFloat64()) })
	}
	flat := func(v float32) func(int, int) float32 { return func(int, int) float32 { return v } }
	with := func(g *Gray, x, y int, v float32) *Gray { g.Set(x, y, v); return g }
	speckle := speckleLike(128, 96)
	for _, c := range []struct {
		name     string
		g        *Gray
		shortcut bool // the first rows prove the contrast
	}{
		{"speckle", speckle, true},
		{"speckle window", speckle.Sub(7, 11, 60, 50), true},
		{"uniform", fill(64, 64, flat(100)), false},
		{"one pixel off in the first rows", with(fill(64, 64, flat(100)), 3, 1, 101), false},
		{"one pixel off below them", with(fill(64, 64, flat(100)), 3, 40, 160), false},
		{"low contrast 0.3", noise(64, 64, 100, 0.3), false},
		{"near the threshold 0.51", noise(64, 64, 100, 0.51), false},
		{"contrast 3 (too little for the first rows)", noise(64, 64, 100, 3), false},
		{"contrast 10", noise(64, 64, 100, 10), true},
		{"flat first rows, speckle below", fill(64, 64, func(x, y int) float32 {
			if y < 8 {
				return 50
			}
			return speckle.At(x, y)
		}), false},
		{"16-bit levels near full scale", noise(64, 64, 65000, 0.4), false},
		{"large values, contrast 8", noise(64, 64, 1e7, 8), true},
		{"NaN in the first rows", with(noise(64, 64, 100, 20), 5, 0, float32(math.NaN())), false},
		{"NaN below them", with(noise(64, 64, 100, 20), 5, 50, float32(math.NaN())), true},
		{"+Inf in the first rows", with(noise(64, 64, 100, 20), 5, 0, float32(math.Inf(1))), false},
		{"all +Inf", fill(32, 32, flat(float32(math.Inf(1)))), false},
		{"one row", noise(64, 1, 100, 20), true},
		{"one pixel", fill(1, 1, flat(7)), false},
		{"2×2", fill(2, 2, func(x, y int) float32 { return float32(x * 40) }), true},
	} {
		t.Run(c.name, func(t *testing.T) {
			want, got := contrastOfStats(c.g), CheckContrast(c.g)
			if (want == nil) != (got == nil) || (want != nil && want.Error() != got.Error()) {
				t.Errorf("CheckContrast = %v, want %v", got, want)
			}
			if s := contrastShown(c.g); s != c.shortcut {
				t.Errorf("contrastShown = %v, want %v", s, c.shortcut)
			}
		})
	}
}

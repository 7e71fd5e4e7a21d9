package imageio

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
)

// lagSum returns Σ (g(p) − mean)·(g(p + h·d) − mean) over the pixel pairs
// of g at lag h along the axis whose index step is d (1 = x, Stride = y):
// each row's products summed in order of x, then the rows' sums in order
// of y. The definition lagTable is checked against.
func lagSum(g *Gray, mean float64, h, d int) float64 {
	w, ht := g.W, g.H
	if d == 1 {
		w -= h
	} else {
		ht -= h
	}
	off := h * d
	var s float64
	for y := 0; y < ht; y++ {
		a := g.Pix[y*g.Stride : y*g.Stride+w]
		b := g.Pix[y*g.Stride+off : y*g.Stride+off+w]
		var rs float64
		for x, v := range a {
			rs += (float64(v) - mean) * (float64(b[x]) - mean)
		}
		s += rs
	}
	return s
}

// hwhmByLagSum is HWHM as it was before lagTable: Stats, then lagSum
// one lag at a time.
func hwhmByLagSum(g *Gray) (hx, hy float64, err error) {
	if g.W > MaxSpeckleWindow || g.H > MaxSpeckleWindow {
		w, h := min(g.W, MaxSpeckleWindow), min(g.H, MaxSpeckleWindow)
		g = g.Sub((g.W-w)/2, (g.H-h)/2, w, h)
	}
	maxLag := min(64, g.W/4, g.H/4, g.W-1, g.H-1)
	mean, std, _, _ := Stats(g)
	if std == 0 {
		return 0, 0, fmt.Errorf("%w: uniform image has no autocorrelation", ErrNoContrast)
	}
	hx, okx := halfLag(func(h int) float64 { return lagSum(g, mean, h, 1) / float64((g.W-h)*g.H) }, maxLag)
	hy, oky := halfLag(func(h int) float64 { return lagSum(g, mean, h, g.Stride) / float64(g.W*(g.H-h)) }, maxLag)
	if !okx || !oky {
		return hx, hy, fmt.Errorf("%w: the autocorrelation stays above ½ up to %d px: speckles too large for a %d×%d px image",
			ErrTooSmall, maxLag, g.W, g.H)
	}
	return hx, hy, nil
}

// TestLagTableIsLagSum checks that the lag table, which sums lagBlock
// lags per pass, gives every lag sum of its definition (lagSum) bit for
// bit, along x and y, up to the largest lag (where it sums one lag at a
// time), on images of several sizes, a window with a stride and 16-bit
// levels; and that HWHM gives the same bits, or the same error, as
// before on speckle, coarse, uniform and tiny images.
func TestLagTableIsLagSum(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 9))
	noise := func(w, h int, scale float64) *Gray {
		g := NewGray(w, h)
		for i := range g.Pix {
			g.Pix[i] = float32(math.Round(rng.Float64() * scale))
		}
		return g
	}
	big := noise(90, 70, 255)
	for _, c := range []struct {
		name string
		g    *Gray
	}{
		{"64×64", noise(64, 64, 255)},
		{"37×53", noise(37, 53, 255)},
		{"window", big.Sub(5, 9, 61, 47)},
		{"16-bit", noise(48, 40, 65535)},
		{"20×17 (one block)", noise(20, 17, 255)},
		{"28×30 (a block, then lags one at a time)", noise(28, 30, 255)},
		{"12×10 (lags one at a time)", noise(12, 10, 255)},
	} {
		t.Run(c.name, func(t *testing.T) {
			g := c.g
			maxLag := min(64, g.W/4, g.H/4, g.W-1, g.H-1)
			mean, _, _, _ := Stats(g)
			lt := newLagTable(g, maxLag)
			for h := maxLag; h >= 0; h-- { // the largest first: every block is summed
				if got, want := lt.x(h), lagSum(g, mean, h, 1); math.Float64bits(got) != math.Float64bits(want) {
					t.Errorf("x lag %d: %v, want %v", h, got, want)
				}
				if got, want := lt.y(h), lagSum(g, mean, h, g.Stride); math.Float64bits(got) != math.Float64bits(want) {
					t.Errorf("y lag %d: %v, want %v", h, got, want)
				}
			}
		})
	}
	speckle := speckleLike(200, 160)
	coarse := NewGray(64, 64)
	for y := range 64 {
		for x := range 64 {
			coarse.Set(x, y, float32(x/16+y/16))
		}
	}
	flat := NewGray(32, 32)
	for i := range flat.Pix {
		flat.Pix[i] = 9
	}
	for _, c := range []struct {
		name string
		g    *Gray
	}{
		{"speckle", speckle}, {"speckle window", speckle.Sub(3, 4, 150, 120)}, {"noise", noise(80, 60, 255)},
		{"coarse", coarse}, {"uniform", flat}, {"2×2", noise(2, 2, 255)}, {"larger than the window", noise(600, 520, 255)},
	} {
		t.Run("HWHM "+c.name, func(t *testing.T) {
			hx, hy, err := HWHM(c.g)
			wx, wy, werr := hwhmByLagSum(c.g)
			if math.Float64bits(hx) != math.Float64bits(wx) || math.Float64bits(hy) != math.Float64bits(wy) {
				t.Errorf("HWHM = %v, %v, want %v, %v", hx, hy, wx, wy)
			}
			if (err == nil) != (werr == nil) || (err != nil && err.Error() != werr.Error()) {
				t.Errorf("HWHM error %v, want %v", err, werr)
			}
		})
	}
}

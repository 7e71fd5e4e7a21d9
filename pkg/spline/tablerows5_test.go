package spline

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"
)

// The basis of the quintic row table is that of the direct evaluation:
// 120·β⁵(t + 2 − q) for q = 0 … 5 (Unser 1999, "Splines: a perfect fit for
// signal and image processing", IEEE Signal Process. Mag. 16(6):22) at
// several t, against quinticWeights.
func TestQuinticBasisMatchesWeights(t *testing.T) {
	for _, x := range []float64{0, 0.25, 0.5, 0.7, 0.999} {
		var w [6]float64
		quinticWeights(x, &w)
		for q := range w {
			var p float64
			for i := 5; i >= 0; i-- {
				p = p*x + quinticBasis[q][i]
			}
			if math.Abs(p/120-w[q]) > 1e-15 {
				t.Errorf("t = %v, q = %d: basis %v, quinticWeights %v", x, q, p/120, w[q])
			}
		}
	}
}

// The quintic row table's samples reproduce the quintic B-spline
// interpolant (TestMatchesSciPy checks it against SciPy) everywhere inside
// the image, at cell corners and edges, for 8-bit and 16-bit grey ranges.
// The bound is the float32 rounding: the stored coefficients and the about
// 60 float32 operations of a sample each add 2⁻²⁴ of their operands, whose
// magnitude is up to 66 times the largest coefficient (the weights of
// 120·β⁵ before the division by 120²), and the quintic prefilter can raise
// the coefficients to 7.5 times the grey level (its gain at the Nyquist
// frequency, 120/16): in all below 2e-6 of the grey-level range. A wrong
// basis polynomial or a row out of place gives errors of whole grey levels.
func TestQuinticRowTableMatchesSpline(t *testing.T) {
	for _, tc := range []struct {
		w, h  int
		scale float32
	}{{1, 1, 1}, {2, 3, 1}, {37, 29, 1}, {64, 48, 257}} {
		g := randomImage(tc.w, tc.h, uint64(tc.w))
		for i := range g.Pix {
			g.Pix[i] *= tc.scale
		}
		s, err := New(g, Quintic)
		if err != nil {
			t.Fatal(err)
		}
		for _, threads := range []int{1, 3} {
			tab, err := NewQuinticRowTable(context.Background(), s, threads)
			if err != nil {
				t.Fatal(err)
			}
			tol := 2e-6 * 255 * float64(tc.scale)
			r := rand.New(rand.NewPCG(1, 2))
			var worst float64
			check := func(x, y float64) {
				if d := math.Abs(tab.At(x, y) - s.At(x, y)); d > worst {
					worst = d
				}
			}
			for y := 0; y < tc.h; y++ {
				for x := 0; x < tc.w; x++ {
					check(float64(x), float64(y))
					if x+1 < tc.w && y+1 < tc.h {
						check(float64(x)+0.5, float64(y)+0.999)
					}
				}
			}
			for k := 0; k < 2000; k++ {
				check(r.Float64()*float64(tc.w-1), r.Float64()*float64(tc.h-1))
			}
			if worst > tol {
				t.Errorf("%d×%d ×%v, %d threads: max |quintic row table − spline| = %.3g, want ≤ %.3g", tc.w, tc.h, tc.scale, threads, worst, tol)
			}
			t.Logf("%d×%d ×%v, %d threads: max |quintic row table − spline| = %.3g (bound %.3g)", tc.w, tc.h, tc.scale, threads, worst, tol)
		}
	}
	if _, err := NewQuinticRowTable(context.Background(), mustNew(t, Cubic), 1); err != ErrNotQuintic {
		t.Errorf("NewQuinticRowTable of a cubic spline: %v, want ErrNotQuintic", err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := NewQuinticRowTable(ctx, mustNew(t, Quintic), 2); err == nil {
		t.Error("NewQuinticRowTable ignored a cancelled context")
	}
}

// FillRows over any partition of the cell rows, in any order, gives
// bitwise the table filled at once, and fills every row.
func TestQuinticRowTableIndependentOfParts(t *testing.T) {
	g := randomImage(45, 38, 4)
	s, err := New(g, Quintic)
	if err != nil {
		t.Fatal(err)
	}
	want := AllocQuinticRowTable(g.W, g.H)
	want.FillRows(s, 0, g.H)
	for _, step := range []int{1, 2, 5, 38} {
		tab := AllocQuinticRowTable(g.W, g.H)
		for y := g.H; y > 0; y -= step {
			tab.FillRows(s, max(y-step, 0), y)
		}
		for i := range want.a {
			if math.Float32bits(tab.a[i]) != math.Float32bits(want.a[i]) {
				t.Fatalf("parts of %d rows: coefficient %d is %v, one part %v", step, i, tab.a[i], want.a[i])
			}
		}
	}
	for y := -2; y <= g.H+2; y++ {
		if want.a[6*(y+2)*g.W] == 0 && want.a[6*(y+2)*g.W+6] == 0 {
			t.Fatalf("coefficient row %d is zero: not filled", y)
		}
	}
}

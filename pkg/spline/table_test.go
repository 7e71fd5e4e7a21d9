package spline

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"
)

// The tabulated bicubic pieces (Pan, Li & Tong 2013, Exp. Mech. 53:1277,
// precomputed interpolation coefficients) must reproduce the B-spline
// interpolant, which TestMatchesSciPy checks against SciPy: everywhere
// inside the image, at cell corners and edges, for 8-bit and 16-bit grey
// ranges, within the float32 rounding of the coefficients (1e-6 of the
// grey-level range; a wrong basis polynomial gives errors of whole grey
// levels).
func TestTableMatchesSpline(t *testing.T) {
	for _, tc := range []struct {
		w, h  int
		scale float32
	}{{1, 1, 1}, {2, 3, 1}, {37, 29, 1}, {64, 48, 257}} {
		g := randomImage(tc.w, tc.h, uint64(tc.w))
		for i := range g.Pix {
			g.Pix[i] *= tc.scale
		}
		s, err := New(g, Cubic)
		if err != nil {
			t.Fatal(err)
		}
		for _, threads := range []int{1, 3} {
			tab, err := NewTable(context.Background(), s, threads)
			if err != nil {
				t.Fatal(err)
			}
			tol := 1e-6 * 255 * float64(tc.scale)
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
				}
			}
			for k := 0; k < 2000; k++ {
				check(r.Float64()*float64(tc.w-1), r.Float64()*float64(tc.h-1))
			}
			if worst > tol {
				t.Errorf("%d×%d ×%v, %d threads: max |table − spline| = %.3g, want ≤ %.3g", tc.w, tc.h, tc.scale, threads, worst, tol)
			}
		}
	}
}

// Line on a table equals At on the same table point by point.
func TestTableLineMatchesAt(t *testing.T) {
	s, _ := New(randomImage(50, 40, 4), Cubic)
	tab, err := NewTable(context.Background(), s, 1)
	if err != nil {
		t.Fatal(err)
	}
	out := make([]float64, 31)
	tab.Line(3.7, 5.2, 1.03, 0.21, out)
	for k, v := range out {
		x, y := 3.7+float64(k)*1.03, 5.2+float64(k)*0.21
		if v != tab.At(x, y) {
			t.Fatalf("Line[%d] = %v, At = %v", k, v, tab.At(x, y))
		}
	}
	if _, err := NewTable(context.Background(), mustNew(t, Quintic), 1); err == nil {
		t.Error("NewTable accepted a quintic spline")
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := NewTable(ctx, s, 2); err == nil {
		t.Error("NewTable ignored a cancelled context")
	}
}

func mustNew(t *testing.T, o Order) *Image {
	s, err := New(randomImage(20, 20, 9), o)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func BenchmarkLineTable(b *testing.B) {
	s, _ := New(randomImage(256, 256, 1), Cubic)
	tab, _ := NewTable(context.Background(), s, 1)
	out := make([]float64, 31)
	b.ReportAllocs()
	for b.Loop() {
		tab.Line(10.3, 20.7, 1.01, 0.02, out)
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*len(out)), "ns/sample")
}

func BenchmarkNewTable1024(b *testing.B) {
	s, _ := New(randomImage(1024, 1024, 1), Cubic)
	b.ReportAllocs()
	for b.Loop() {
		if _, err := NewTable(context.Background(), s, 1); err != nil {
			b.Fatal(err)
		}
	}
}

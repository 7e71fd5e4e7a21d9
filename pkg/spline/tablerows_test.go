package spline

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"
)

// The row table's samples must reproduce the B-spline interpolant (which
// TestMatchesSciPy checks against SciPy) everywhere inside the image, at
// cell corners and edges, for 8-bit and 16-bit grey ranges. The bound is
// the float32 rounding: each stored coefficient is within 2⁻²⁴ of its
// value, and each of the about 30 float32 operations of a sample adds
// 2⁻²⁴ of its operands, whose magnitude is a few times the largest
// coefficient (at most √3 times the largest grey level for the cubic
// prefilter, Unser 1999): in all well below 1e-6 of the grey-level range. A
// wrong basis polynomial or a row out of place gives errors of whole grey
// levels. The bicubic table is held to the same bound.
func TestRowTableMatchesSpline(t *testing.T) {
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
			tab, err := NewRowTable(context.Background(), s, threads)
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
					if x+1 < tc.w && y+1 < tc.h {
						check(float64(x)+0.5, float64(y)+0.999)
					}
				}
			}
			for k := 0; k < 2000; k++ {
				check(r.Float64()*float64(tc.w-1), r.Float64()*float64(tc.h-1))
			}
			if worst > tol {
				t.Errorf("%d×%d ×%v, %d threads: max |row table − spline| = %.3g, want ≤ %.3g", tc.w, tc.h, tc.scale, threads, worst, tol)
			}
			t.Logf("%d×%d ×%v, %d threads: max |row table − spline| = %.3g (bound %.3g)", tc.w, tc.h, tc.scale, threads, worst, tol)
		}
	}
}

// Line on a row table equals At point by point; quintic splines and
// cancelled contexts are refused.
func TestRowTableLineMatchesAt(t *testing.T) {
	s, _ := New(randomImage(50, 40, 4), Cubic)
	tab, err := NewRowTable(context.Background(), s, 1)
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
	if _, err := NewRowTable(context.Background(), mustNew(t, Quintic), 1); err != ErrNotCubic {
		t.Errorf("NewRowTable of a quintic spline: %v, want ErrNotCubic", err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := NewRowTable(ctx, s, 2); err == nil {
		t.Error("NewRowTable ignored a cancelled context")
	}
}

// FillRows over any partition of the cell rows, in any order, gives
// bitwise the table of NewRowTable, and fills every row (a row left out
// would stay zero and fail the comparison with the spline above, but here
// it is caught as a difference from a table filled at once).
func TestRowTableIndependentOfParts(t *testing.T) {
	g := randomImage(45, 38, 4)
	s, err := New(g, Cubic)
	if err != nil {
		t.Fatal(err)
	}
	want := AllocRowTable(g.W, g.H)
	want.FillRows(s, 0, g.H)
	for _, step := range []int{1, 2, 5, 38} {
		tab := AllocRowTable(g.W, g.H)
		for y := g.H; y > 0; y -= step {
			tab.FillRows(s, max(y-step, 0), y)
		}
		for i := range want.a {
			if math.Float32bits(tab.a[i]) != math.Float32bits(want.a[i]) {
				t.Fatalf("parts of %d rows: coefficient %d is %v, one part %v", step, i, tab.a[i], want.a[i])
			}
		}
	}
	// Every row has nonzero constant terms (an unfilled row stays zero).
	for y := -1; y <= g.H+1; y++ {
		if want.a[4*(y+1)*g.W] == 0 && want.a[4*(y+1)*g.W+4] == 0 {
			t.Fatalf("coefficient row %d is zero: not filled", y)
		}
	}
}

func BenchmarkLineRowTable(b *testing.B) {
	s, _ := New(randomImage(256, 256, 1), Cubic)
	tab, _ := NewRowTable(context.Background(), s, 1)
	out := make([]float64, 31)
	b.ReportAllocs()
	for b.Loop() {
		tab.Line(10.3, 20.7, 1.01, 0.02, out)
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*len(out)), "ns/sample")
}

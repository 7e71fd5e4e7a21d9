package spline

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"
)

// coefficientTable is what the three coefficient tables share for the tests
// below.
type coefficientTable interface {
	At(x, y float64) float64
	Coefficients() []float32
}

// tableKind describes one kind of coefficient table for the table-driven
// tests: how to build and fill it, its layout and its rounding bound.
type tableKind struct {
	name  string
	order Order
	// tol bounds |table − spline| as a fraction of the grey-level range;
	// each kind's entry says where its bound comes from.
	tol float64
	// build is the New… constructor; wrongOrder is the error it returns
	// for a spline of the other order.
	build      func(ctx context.Context, s *Image, threads int) (coefficientTable, error)
	wrongOrder error
	// alloc and fill are the Alloc… and FillRows steps of a build in parts.
	alloc func(w, h int) coefficientTable
	fill  func(t coefficientTable, s *Image, y0, y1 int)
	// per is the number of float32 per cell, above the number of extra
	// coefficient rows before row 0 and extra the number of extra rows in
	// all (the layout of Coefficients).
	per, above, extra int
	// line is the table's Line, nil if it has none.
	line func(t coefficientTable, x, y, dx, dy float64, out []float64)
}

var tableKinds = []tableKind{
	{
		// The tabulated bicubic pieces (Pan, Li & Tong 2013, Exp. Mech.
		// 53:1277, precomputed interpolation coefficients). The rounding
		// of the float32 coefficients and of the 16 multiply-adds of a
		// sample stays well below 1e-6 of the grey-level range; a wrong
		// basis polynomial gives errors of whole grey levels.
		name: "bicubic table", order: Cubic, tol: 1e-6,
		build: func(ctx context.Context, s *Image, threads int) (coefficientTable, error) {
			return NewTable(ctx, s, threads)
		},
		wrongOrder: ErrNotCubic,
		alloc:      func(w, h int) coefficientTable { return AllocTable(w, h) },
		fill:       func(t coefficientTable, s *Image, y0, y1 int) { t.(*Table).FillRows(s, y0, y1) },
		per:        16,
		line: func(t coefficientTable, x, y, dx, dy float64, out []float64) {
			t.(*Table).Line(x, y, dx, dy, out)
		},
	},
	{
		// The row table: each stored coefficient is within 2⁻²⁴ of its
		// value, and each of the about 30 float32 operations of a sample
		// adds 2⁻²⁴ of its operands, whose magnitude is a few times the
		// largest coefficient (at most √3 times the largest grey level for
		// the cubic prefilter, Unser 1999): in all well below 1e-6 of the
		// grey-level range.
		name: "row table", order: Cubic, tol: 1e-6,
		build: func(ctx context.Context, s *Image, threads int) (coefficientTable, error) {
			return NewRowTable(ctx, s, threads)
		},
		wrongOrder: ErrNotCubic,
		alloc:      func(w, h int) coefficientTable { return AllocRowTable(w, h) },
		fill:       func(t coefficientTable, s *Image, y0, y1 int) { t.(*RowTable).FillRows(s, y0, y1) },
		per:        4, above: 1, extra: 3,
		line: func(t coefficientTable, x, y, dx, dy float64, out []float64) {
			t.(*RowTable).Line(x, y, dx, dy, out)
		},
	},
	{
		// The quintic row table: the stored coefficients and the about 60
		// float32 operations of a sample each add 2⁻²⁴ of their operands,
		// whose magnitude is up to 66 times the largest coefficient (the
		// weights of 120·β⁵ before the division by 120²), and the quintic
		// prefilter can raise the coefficients to 7.5 times the grey level
		// (its gain at the Nyquist frequency, 120/16): in all below 2e-6 of
		// the grey-level range.
		name: "quintic row table", order: Quintic, tol: 2e-6,
		build: func(ctx context.Context, s *Image, threads int) (coefficientTable, error) {
			return NewQuinticRowTable(ctx, s, threads)
		},
		wrongOrder: ErrNotQuintic,
		alloc:      func(w, h int) coefficientTable { return AllocQuinticRowTable(w, h) },
		fill:       func(t coefficientTable, s *Image, y0, y1 int) { t.(*QuinticRowTable).FillRows(s, y0, y1) },
		per:        6, above: 2, extra: 5,
	},
}

// Every table's samples must reproduce the B-spline interpolant of its
// order (which TestMatchesSciPy checks against SciPy) everywhere inside the
// image, at cell corners and edges, for 8-bit and 16-bit grey ranges and
// any number of threads, within the float32 rounding bound of its kind. A
// wrong basis polynomial or a row out of place gives errors of whole grey
// levels.
func TestTablesMatchSpline(t *testing.T) {
	for _, k := range tableKinds {
		for _, tc := range []struct {
			w, h  int
			scale float32
		}{{1, 1, 1}, {2, 3, 1}, {37, 29, 1}, {64, 48, 257}} {
			g := randomImage(tc.w, tc.h, uint64(tc.w))
			for i := range g.Pix {
				g.Pix[i] *= tc.scale
			}
			s, err := New(g, k.order)
			if err != nil {
				t.Fatal(err)
			}
			for _, threads := range []int{1, 3} {
				tab, err := k.build(context.Background(), s, threads)
				if err != nil {
					t.Fatal(err)
				}
				tol := k.tol * 255 * float64(tc.scale)
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
				for range 2000 {
					check(r.Float64()*float64(tc.w-1), r.Float64()*float64(tc.h-1))
				}
				if worst > tol {
					t.Errorf("%s, %d×%d ×%v, %d threads: max |table − spline| = %.3g, want ≤ %.3g", k.name, tc.w, tc.h, tc.scale, threads, worst, tol)
				}
				t.Logf("%s, %d×%d ×%v, %d threads: max |table − spline| = %.3g (bound %.3g)", k.name, tc.w, tc.h, tc.scale, threads, worst, tol)
			}
		}
	}
}

// Line equals At point by point; a spline of the other order and a
// cancelled context are refused.
func TestTablesLineAndRefusals(t *testing.T) {
	for _, k := range tableKinds {
		s, _ := New(randomImage(50, 40, 4), k.order)
		tab, err := k.build(context.Background(), s, 1)
		if err != nil {
			t.Fatal(err)
		}
		if k.line != nil {
			out := make([]float64, 31)
			k.line(tab, 3.7, 5.2, 1.03, 0.21, out)
			for i, v := range out {
				x, y := 3.7+float64(i)*1.03, 5.2+float64(i)*0.21
				if v != tab.At(x, y) {
					t.Fatalf("%s: Line[%d] = %v, At = %v", k.name, i, v, tab.At(x, y))
				}
			}
		}
		other := Quintic
		if k.order == Quintic {
			other = Cubic
		}
		if _, err := k.build(context.Background(), mustNew(t, other), 1); err != k.wrongOrder {
			t.Errorf("%s of a %v spline: %v, want %v", k.name, other, err, k.wrongOrder)
		}
		ctx, cancel := context.WithCancel(context.Background())
		cancel()
		if _, err := k.build(ctx, s, 2); err == nil {
			t.Errorf("%s ignored a cancelled context", k.name)
		}
	}
}

// FillRows over any partition of the cell rows, in any order, gives bitwise
// the table filled at once, and fills every coefficient row (a row left out
// would stay zero and fail the comparison with the spline above; here it is
// caught as a difference from a table filled at once, and by its zero
// constant terms).
func TestTablesIndependentOfParts(t *testing.T) {
	g := randomImage(45, 38, 4)
	for _, k := range tableKinds {
		s, err := New(g, k.order)
		if err != nil {
			t.Fatal(err)
		}
		want := k.alloc(g.W, g.H)
		k.fill(want, s, 0, g.H)
		wa := want.Coefficients()
		for _, step := range []int{1, 2, 5, 38} {
			tab := k.alloc(g.W, g.H)
			for y := g.H; y > 0; y -= step {
				k.fill(tab, s, max(y-step, 0), y)
			}
			for i, v := range tab.Coefficients() {
				if math.Float32bits(v) != math.Float32bits(wa[i]) {
					t.Fatalf("%s, parts of %d rows: coefficient %d is %v, one part %v", k.name, step, i, v, wa[i])
				}
			}
		}
		if n := k.per * g.W * (g.H + k.extra); len(wa) != n {
			t.Fatalf("%s: %d coefficients, want %d", k.name, len(wa), n)
		}
		for r := range g.H + k.extra {
			o := k.per * r * g.W
			if wa[o] == 0 && wa[o+k.per] == 0 {
				t.Fatalf("%s: coefficient row %d is zero: not filled", k.name, r-k.above)
			}
		}
	}
}

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

package correlate

import (
	"context"
	"math"
	"slices"
	"testing"

	"github.com/mottledic/mottle/pkg/spline"
	"github.com/mottledic/mottle/pkg/synth"
)

// A prefetch is only a hint to the processor: runs with and without it
// give bitwise the same points, first and second order, on the rotated
// pair with a blank patch of TestDeterministicAcrossThreads.
func TestPrefetchLeavesResults(t *testing.T) {
	m := synth.Rotation{Angle: 6, CX: 100, CY: 90, U: 1.7, V: -2.2}
	ref, def := pair(t, m, 200, 180, 8, 2, 3)
	for y := 60; y < 100; y++ {
		for x := 40; x < 90; x++ {
			def.Set(x, y, 128)
		}
	}
	for _, c := range []struct {
		sh     Shape
		interp spline.Order
		direct bool
		table  tableKind
	}{{First, spline.Cubic, false, tableCells}, {First, spline.Cubic, false, tableRows}, {Second, spline.Cubic, false, tableCells}, {Second, spline.Cubic, false, tableRows},
		{First, spline.Cubic, true, 0}, {Second, spline.Quintic, false, 0}, {First, spline.Quintic, true, 0}} {
		sh := c.sh
		opt := Options{Subset: 21, Step: 5, Shape: sh, Interp: c.interp, Threads: 2}
		var want []uint64
		for _, tun := range []tuning{{noFetch: true, direct: c.direct, table: c.table}, {direct: c.direct, table: c.table}} {
			res, err := runWith(context.Background(), ref, def, opt, tun)
			if err != nil {
				t.Fatal(err)
			}
			got := pointBits(res.Points)
			if want == nil {
				want = got
				continue
			}
			if !slices.Equal(got, want) {
				t.Errorf("%+v: the points differ with the prefetch", c)
			}
		}
	}
}

// prefetch accepts any centre and any guess, also off the image, huge or
// not a number, without a panic, and writes nothing to the table, the
// deformed spline or the reference data.
func TestPrefetchAnyGuess(t *testing.T) {
	for _, c := range []struct {
		interp spline.Order
		table  bool
		kind   tableKind
	}{{spline.Cubic, true, tableCells}, {spline.Cubic, true, tableRows}, {spline.Cubic, false, 0}, {spline.Quintic, true, 0}, {spline.Quintic, false, 0}} {
		prefetchAnyGuess(t, c.interp, c.table, c.kind)
	}
}

func prefetchAnyGuess(t *testing.T, interp spline.Order, table bool, kind tableKind) {
	ref, def := pair(t, synth.Translation{U: 1.5, V: -0.5}, 64, 48, 8, 1, 5)
	r, err := newRun(context.Background(), ref, def, Options{Subset: 21, Interp: interp, Threads: 1}, tuning{table: kind})
	if err != nil {
		t.Fatal(err)
	}
	defer r.stop()
	if table {
		if err := r.tabulate(context.Background(), 1<<30); err != nil {
			t.Fatal(err)
		}
	}
	s := r.solvers[0]
	quintic := interp == spline.Quintic
	if (s.tab != nil) != (table && !quintic && kind == tableCells) || (s.rtab != nil) != (table && !quintic && kind == tableRows) ||
		(s.qtab != nil) != (table && quintic) || (s.def != nil) == table {
		t.Fatalf("%v table %v %v: solver has table %v, row table %v, quintic row table %v, spline %v", interp, table, kind, s.tab != nil, s.rtab != nil, s.qtab != nil, s.def != nil)
	}
	var tab0 []float32
	var sp0 []float64
	coef := func() []float32 {
		if s.rtab != nil {
			return s.rtab.Coefficients()
		}
		if s.qtab != nil {
			return s.qtab.Coefficients()
		}
		return s.tab.Coefficients()
	}
	if table {
		tab0 = slices.Clone(coef())
	} else {
		c, _ := s.def.Coefficients()
		sp0 = slices.Clone(c)
	}
	pix0, gx0, gy0 := slices.Clone(ref.Pix), slices.Clone(r.gx), slices.Clone(r.gy)
	inf, nan := math.Inf(1), math.NaN()
	centres := [][2]float64{{32, 24}, {10, 10}, {53, 37}, {0, 0}, {63, 47}, {-3, 20}, {70, 20}, {20, 60}, {10.5, 10.25}, {nan, 5}, {inf, -inf}, {inf, inf}, {1e300, 20}, {20, 1e19}}
	guesses := [][12]float64{{}, {U: 1.5, V: -0.5}, {U: 40}, {V: -30}, {U: 1e300, V: -1e300}, {U: nan}, {Ux: inf}, {Vy: -2}, {Ux: 5, Uy: -5, Vx: 5, Vy: 5},
		{Uxx: 1e6, Vyy: nan}, {U: -10, V: -10, Uxy: 0.5}}
	for _, c := range centres {
		s.prefetch(c[0], c[1], nil)
		for _, g := range guesses {
			s.prefetch(c[0], c[1], &g)
		}
	}
	same := slices.Equal(ref.Pix, pix0) && slices.Equal(r.gx, gx0) && slices.Equal(r.gy, gy0)
	if table {
		same = same && slices.Equal(coef(), tab0)
	} else {
		c, _ := s.def.Coefficients()
		same = same && slices.Equal(c, sp0)
	}
	if !same {
		t.Errorf("%v, table %v %v: prefetch changed the deformed image's data or the reference data", interp, table, kind)
	}
}

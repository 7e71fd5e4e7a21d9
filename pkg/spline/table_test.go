package spline

import (
	"context"
	"math"
	"strings"
	"testing"
)

func mustNew(t *testing.T, o Order) *Image {
	s, err := New(randomImage(20, 20, 9), o)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

// BenchmarkLine times Line over a 31-sample subset row on each table that
// has it: ns per sample.
func BenchmarkLine(b *testing.B) {
	s, _ := New(randomImage(256, 256, 1), Cubic)
	for _, k := range tableKinds {
		if k.line == nil {
			continue
		}
		tab, _ := k.build(context.Background(), s, 1)
		out := make([]float64, 31)
		b.Run(k.name, func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				k.line(tab, 10.3, 20.7, 1.01, 0.02, out)
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*len(out)), "ns/sample")
		})
	}
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

// The steps of a build give bitwise the same spline, gradients and table
// whichever parts they are split in: here every row and block on its own,
// in reverse order, against NewContext, SampleGradients and NewTable.
func TestStepsIndependentOfParts(t *testing.T) {
	g := randomImage(45, 38, 4)
	for _, order := range []Order{Cubic, Quintic} {
		want, err := NewContext(context.Background(), g, order, 1)
		if err != nil {
			t.Fatal(err)
		}
		b, err := NewBuild(g, order)
		if err != nil {
			t.Fatal(err)
		}
		for y := b.Rows() - 1; y >= 0; y-- {
			b.FilterRows(y, y+1)
		}
		if err := b.Err(); err != nil {
			t.Fatal(err)
		}
		for k := b.Blocks() - 1; k >= 0; k-- {
			b.FilterColumns(k, k+1)
		}
		got := b.Finish()
		for i := range want.c {
			if math.Float64bits(got.c[i]) != math.Float64bits(want.c[i]) {
				t.Fatalf("%v: coefficient %d is %v, NewContext %v", order, i, got.c[i], want.c[i])
			}
		}
		wx, wy, _ := want.SampleGradients(context.Background(), 1)
		gx, gy := make([]float32, len(wx)), make([]float32, len(wy))
		for y := g.H - 1; y >= 0; y-- {
			got.GradientRows(gx, gy, y, y+1)
		}
		for i := range wx {
			if gx[i] != wx[i] || gy[i] != wy[i] {
				t.Fatalf("%v: gradient %d is (%v, %v), SampleGradients (%v, %v)", order, i, gx[i], gy[i], wx[i], wy[i])
			}
		}
		if order != Cubic {
			if _, err := NewTable(context.Background(), got, 1); err != ErrNotCubic {
				t.Fatalf("NewTable of a quintic spline: %v, want ErrNotCubic", err)
			}
			continue
		}
		wt, _ := NewTable(context.Background(), want, 1)
		tab := AllocTable(g.W, g.H)
		for y := g.H - 1; y >= 0; y -= 2 {
			tab.FillRows(got, max(y-1, 0), y+1)
		}
		for i := range wt.a {
			if math.Float32bits(tab.a[i]) != math.Float32bits(wt.a[i]) {
				t.Fatalf("table coefficient %d is %v, NewTable %v", i, tab.a[i], wt.a[i])
			}
		}
	}
}

// The first non-finite sample in row-major order is the one reported,
// whichever rows FilterRows ran first.
func TestBuildReportsFirstBadSample(t *testing.T) {
	g := randomImage(9, 7, 2)
	g.Pix[5*g.Stride+1] = float32(math.Inf(1))
	g.Pix[2*g.Stride+6] = float32(math.NaN())
	g.Pix[2*g.Stride+7] = float32(math.NaN())
	b, err := NewBuild(g, Cubic)
	if err != nil {
		t.Fatal(err)
	}
	for y := b.Rows() - 1; y >= 0; y-- {
		b.FilterRows(y, y+1)
	}
	err = b.Err()
	if err == nil || !strings.Contains(err.Error(), "(6, 2)") {
		t.Fatalf("Err() = %v, want the pixel (6, 2)", err)
	}
	if _, err := NewContext(context.Background(), g, Cubic, 3); err == nil || err.Error() != b.Err().Error() {
		t.Fatalf("NewContext: %v, want %v", err, b.Err())
	}
}

// BenchmarkSteps1024 times each step of building a 1024×1024 cubic
// spline, its gradients and its table on one goroutine: ns per pixel.
func BenchmarkSteps1024(b *testing.B) {
	g := randomImage(1024, 1024, 1)
	bd, _ := NewBuild(g, Cubic)
	bd.FilterRows(0, bd.Rows())
	bd.FilterColumns(0, bd.Blocks())
	s := bd.Finish()
	q, _ := NewContext(context.Background(), g, Quintic, 1)
	gx, gy := make([]float32, 1024*1024), make([]float32, 1024*1024)
	tab := AllocTable(1024, 1024)
	rt := AllocRowTable(1024, 1024)
	qt := AllocQuinticRowTable(1024, 1024)
	px := float64(1024 * 1024)
	for _, c := range []struct {
		name string
		f    func()
	}{
		{"check+rows", func() { bd.FilterRows(0, bd.Rows()) }},
		{"columns", func() { bd.FilterColumns(0, bd.Blocks()) }},
		{"gradients", func() { s.GradientRows(gx, gy, 0, 1024) }},
		{"gradients-quintic", func() { q.GradientRows(gx, gy, 0, 1024) }},
		{"table", func() { tab.FillRows(s, 0, 1024) }},
		{"table-alloc", func() { tab = AllocTable(1024, 1024) }},
		{"rowtable", func() { rt.FillRows(s, 0, 1024) }},
		{"rowtable-alloc", func() { rt = AllocRowTable(1024, 1024) }},
		{"quintic-rowtable", func() { qt.FillRows(q, 0, 1024) }},
	} {
		b.Run(c.name, func(b *testing.B) {
			for b.Loop() {
				c.f()
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/px, "ns/px")
		})
	}
}

// Coefficients indexes as documented: at a pixel centre the cubic B-spline
// is (c[x−1] + 4c[x] + c[x+1])/6 in each direction, the values of the cubic
// B-spline at −1, 0, 1 (Unser 1999, "Splines: a perfect fit for signal and
// image processing", IEEE Signal Process. Mag. 16(6):22), and the mirrored
// margins reach Margin rows and columns past the edges.
func TestCoefficientsIndex(t *testing.T) {
	s := mustNew(t, Cubic)
	c, cs := s.Coefficients()
	if len(c) != cs*(s.H+2*Margin) || cs != s.W+2*Margin {
		t.Fatalf("%d coefficients with stride %d for a %d×%d image, margin %d", len(c), cs, s.W, s.H, Margin)
	}
	at := func(x, y int) float64 { return c[(y+Margin)*cs+x+Margin] }
	b := [3]float64{1.0 / 6, 4.0 / 6, 1.0 / 6}
	for _, p := range [][2]int{{0, 0}, {5, 7}, {19, 19}, {0, 19}, {12, 3}} {
		var v float64
		for j := -1; j <= 1; j++ {
			for i := -1; i <= 1; i++ {
				v += b[j+1] * b[i+1] * at(p[0]+i, p[1]+j)
			}
		}
		if got := s.At(float64(p[0]), float64(p[1])); math.Abs(got-v) > 1e-9 {
			t.Errorf("(%d, %d): At %v, from Coefficients %v", p[0], p[1], got, v)
		}
	}
}

package results

import (
	"context"
	"io"
	"math"
	"testing"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
)

// benchCase builds the field of a w×h image on a grid of the given step
// (subset 31) from an invented smooth displacement, and a speckle-like
// background, without correlating.
func benchCase(tb testing.TB, w, h, step int) (*field.Field, *imageio.Gray) {
	tb.Helper()
	x0 := 15
	g := correlate.Grid{X0: x0, Y0: x0, Step: step, Nx: (w-2*x0-1)/step + 1, Ny: (h-2*x0-1)/step + 1}
	n := g.Len()
	in := Input{Grid: g, Subset: 31, U: make([]float64, n), V: make([]float64, n), StdU: make([]float64, n), StdV: make([]float64, n),
		ZNCC: make([]float64, n), Iterations: make([]float64, n)}
	for k := range n {
		X, Y := g.At(k%g.Nx, k/g.Nx)
		x, y := float64(X)/float64(w), float64(Y)/float64(h)
		in.U[k] = 2 + 3e-3*float64(X) + 0.5*math.Sin(6*x)*y
		in.V[k] = -1 - 2e-3*float64(Y) + 0.3*math.Cos(5*y)*x
		in.StdU[k], in.StdV[k] = 0.01, 0.012
		in.ZNCC[k], in.Iterations[k] = 0.99-0.01*x, 4
	}
	f, err := Build(context.Background(), in, Options{StrainWindow: 5, StrainFit: "plane", Software: "bench"})
	if err != nil {
		tb.Fatal(err)
	}
	bg := imageio.NewGray(w, h)
	bg.Bits = 8
	for k := range bg.Pix {
		bg.Pix[k] = float32(128 + 100*math.Sin(float64(k)*0.7)*math.Cos(float64(k/w)*0.9))
	}
	f.Meta.ImageWidth, f.Meta.ImageHeight = w, h
	return f, bg
}

// BenchmarkEncode measures the formats of a 1024×1024 results folder
// (step 8, 15,376 points) in memory: the default set against every
// format, and each format alone. Compare the ratios of one run.
func BenchmarkEncode(b *testing.B) {
	f, bg := benchCase(b, 1024, 1024, 8)
	src := Sources{Ref: bg, Def: bg}
	cases := []string{"default", "all"}
	for _, fm := range Formats() {
		cases = append(cases, fm.Name)
	}
	for _, c := range cases {
		set, err := ParseFormats(c)
		if err != nil {
			b.Fatal(err)
		}
		if c != "default" && c != "all" && c != NPZ {
			delete(set, NPZ)
		}
		b.Run(c, func(b *testing.B) {
			b.ReportAllocs()
			var size int
			for b.Loop() {
				files, err := Encode(context.Background(), f, src, set)
				if err != nil {
					b.Fatal(err)
				}
				size = 0
				for _, v := range files {
					size += len(v)
				}
			}
			b.ReportMetric(float64(size), "bytes")
			b.ReportMetric(float64(f.Grid.Len())*float64(b.N)/b.Elapsed().Seconds(), "points/s")
		})
	}
}

// BenchmarkBuild measures the field builder on the same grid.
func BenchmarkBuild(b *testing.B) {
	f, _ := benchCase(b, 1024, 1024, 8)
	_ = f
	g := correlate.Grid{X0: 15, Y0: 15, Step: 8, Nx: 124, Ny: 124}
	n := g.Len()
	in := Input{Grid: g, Subset: 31, U: make([]float64, n), V: make([]float64, n), ZNCC: make([]float64, n)}
	for k := range n {
		in.U[k], in.V[k], in.ZNCC[k] = 1e-3*float64(k%g.Nx), -2e-3*float64(k/g.Nx), 0.99
	}
	for b.Loop() {
		if _, err := Build(context.Background(), in, Options{StrainWindow: 5, StrainFit: "plane"}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "points/s")
}

var _ = io.Discard

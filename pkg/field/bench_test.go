package field

import (
	"io"
	"math"
	"testing"
)

// benchField returns a 300×300-point field with every canonical quantity.
func benchField() *Field {
	f := New(300, 300, 0, 0, 4, 21)
	for k, n := range CanonicalNames() {
		q := make([]float64, f.Grid.Len())
		for p := range q {
			q[p] = math.Sin(float64(p*(k+1))) * 1e-3
		}
		f.Set(n, DefaultUnit(n, "px"), q)
	}
	return f
}

// BenchmarkEncoders measures each encoder on a float64 field and on the
// same field in float32 precision (what results.Build makes).
func BenchmarkEncoders(b *testing.B) {
	f64 := benchField()
	f32 := benchField()
	f32.Meta.Precision = Float32
	for _, f := range []*Field{f64, f32} {
		prec := "float64"
		if f.Meta.Precision == Float32 {
			prec = "float32"
		}
		b.Run(prec, func(b *testing.B) { benchEncoders(b, f) })
	}
}

func benchEncoders(b *testing.B, f *Field) {
	for _, c := range []struct {
		name string
		fn   func(io.Writer, *Field) error
	}{{"json", WriteJSON}, {"csv", WriteCSV}, {"vts", WriteVTS}, {"npz", WriteNPZ}} {
		b.Run(c.name, func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				if err := c.fn(io.Discard, f); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(f.Grid.Len())*float64(b.N)/b.Elapsed().Seconds(), "points/s")
		})
	}
}

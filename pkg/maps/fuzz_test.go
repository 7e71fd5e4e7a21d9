package maps

import (
	"encoding/binary"
	"math"
	"testing"
)

// FuzzRender feeds arbitrary positions and values to Render and
// RenderVectors: they must return an image or an error, never panic.
func FuzzRender(f *testing.F) {
	f.Add(uint8(3), uint8(2), []byte("0123456789abcdef0123456789abcdef0123456789abcdef"))
	f.Add(uint8(2), uint8(2), make([]byte, 96))
	nan := make([]byte, 8*12)
	for i := 0; i < 12; i++ {
		binary.LittleEndian.PutUint64(nan[8*i:], math.Float64bits(math.NaN()))
	}
	f.Add(uint8(2), uint8(2), nan)
	f.Fuzz(func(t *testing.T, nx, ny uint8, data []byte) {
		n := int(nx%6) * int(ny%6)
		next := func() float64 {
			if len(data) < 8 {
				return 1
			}
			v := math.Float64frombits(binary.LittleEndian.Uint64(data))
			data = data[8:]
			if finite(v) {
				v = math.Mod(v, 200) // keep within a small picture
			}
			return v
		}
		l := Layer{Nx: int(nx % 6), Ny: int(ny % 6)}
		for range n {
			l.X, l.Y, l.Values = append(l.X, next()), append(l.Y, next()), append(l.Values, next())
		}
		bg := flatGray(48, 40, 77)
		if m, err := Render(l, bg, Options{}); err == nil && m.Image == nil {
			t.Fatal("no error and no image")
		}
		v := Vectors{Nx: l.Nx, Ny: l.Ny, X: l.X, Y: l.Y, U: l.Values, V: l.Values}
		if m, err := RenderVectors(v, nil, VectorOptions{}); err == nil && m.Image == nil {
			t.Fatal("no error and no image")
		}
	})
}

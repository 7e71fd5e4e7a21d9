package maps

import (
	"bytes"
	"encoding/binary"
	"image"
	"image/png"
	"math"
	"testing"
)

// checkPNG encodes img with EncodePNG and decodes it with image/png: the
// same size and the same colour at every pixel.
func checkPNG(t *testing.T, img *image.RGBA) {
	t.Helper()
	data, err := EncodePNG(img)
	if err != nil {
		t.Fatalf("encode PNG: %v", err)
	}
	got, err := png.Decode(bytes.NewReader(data))
	if err != nil {
		t.Fatalf("the PNG does not decode: %v", err)
	}
	if got.Bounds() != img.Bounds() {
		t.Fatalf("PNG of %v decodes to %v", img.Bounds(), got.Bounds())
	}
	b := img.Bounds()
	for y := b.Min.Y; y < b.Max.Y; y++ {
		for x := b.Min.X; x < b.Max.X; x++ {
			r0, g0, b0, a0 := img.At(x, y).RGBA()
			r1, g1, b1, a1 := got.At(x, y).RGBA()
			if r0 != r1 || g0 != g1 || b0 != b1 || a0 != a1 {
				t.Fatalf("pixel (%d, %d) is %v in the map and %v in its PNG", x, y, img.At(x, y), got.At(x, y))
			}
		}
	}
}

// FuzzRender feeds arbitrary positions and values to Render and
// RenderVectors: they must return an image or an error, never panic. An
// image must hold the background at its own size (no MaxWidth, so scale
// 1) and the colour bar inside its bounds, a finite colour range, and
// encode to a PNG that image/png decodes to the same pixels.
func FuzzRender(f *testing.F) {
	f.Add(uint8(3), uint8(2), []byte("0123456789abcdef0123456789abcdef0123456789abcdef"))
	f.Add(uint8(2), uint8(2), make([]byte, 96))
	nan := make([]byte, 8*12)
	for i := 0; i < 12; i++ {
		binary.LittleEndian.PutUint64(nan[8*i:], math.Float64bits(math.NaN()))
	}
	f.Add(uint8(2), uint8(2), nan)
	// A 3×2 grid over the background with distinct values: renders.
	var grid []byte
	for k, p := range [][3]float64{{5, 5, 1}, {20, 5, 2}, {35, 5, 3}, {5, 25, 4}, {20, 25, 5}, {35, 25, 6}} {
		for _, v := range p {
			grid = binary.LittleEndian.AppendUint64(grid, math.Float64bits(v+float64(k%2)/4))
		}
	}
	f.Add(uint8(3), uint8(2), grid)
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
		if m, err := Render(l, bg, Options{}); err == nil {
			if m.Image == nil {
				t.Fatal("no error and no image")
			}
			if m.Picture.Dx() != bg.W || m.Picture.Dy() != bg.H || m.ScaleX != 1 || m.ScaleY != 1 {
				t.Fatalf("picture %v at scale %g×%g for a %d×%d background, want its own size", m.Picture, m.ScaleX, m.ScaleY, bg.W, bg.H)
			}
			b := m.Image.Bounds()
			if !m.Picture.In(b) || m.ColorBar.Empty() || !m.ColorBar.In(b) || m.ColorBar.Overlaps(m.Picture) {
				t.Fatalf("picture %v and colour bar %v in an image of %v", m.Picture, m.ColorBar, b)
			}
			if !finite(m.Range[0]) || !finite(m.Range[1]) || !(m.Range[0] < m.Range[1]) {
				t.Fatalf("colour range %v", m.Range)
			}
			checkPNG(t, m.Image)
			// The same map drawn indexed (the results folder's maps): the
			// same layout and range, an image of the same size, and a PNG
			// that image/png decodes to the same pixels.
			mi, err := Render(l, bg, Options{Indexed: true})
			if err != nil {
				t.Fatalf("full colour renders, indexed fails: %v", err)
			}
			if mi.Indexed == nil || mi.Picture != m.Picture || mi.ColorBar != m.ColorBar || mi.Range != m.Range {
				t.Fatalf("indexed map: image %v, picture %v, bar %v, range %v; full colour %v, %v, %v",
					mi.Indexed != nil, mi.Picture, mi.ColorBar, mi.Range, m.Picture, m.ColorBar, m.Range)
			}
			if mi.Indexed.Bounds() != m.Image.Bounds() {
				t.Fatalf("indexed image %v, full colour %v", mi.Indexed.Bounds(), m.Image.Bounds())
			}
			data, err := EncodePNG(mi.Raster())
			if err != nil {
				t.Fatalf("encode indexed PNG: %v", err)
			}
			got, err := png.Decode(bytes.NewReader(data))
			if err != nil || got.Bounds() != mi.Indexed.Bounds() {
				t.Fatalf("indexed PNG decodes to %v, %v", got, err)
			}
			ib := mi.Indexed.Bounds()
			for y := ib.Min.Y; y < ib.Max.Y; y++ {
				for x := ib.Min.X; x < ib.Max.X; x++ {
					r0, g0, b0, a0 := mi.Indexed.At(x, y).RGBA()
					r1, g1, b1, a1 := got.At(x, y).RGBA()
					if r0 != r1 || g0 != g1 || b0 != b1 || a0 != a1 {
						t.Fatalf("indexed pixel (%d, %d) is %v in the map and %v in its PNG", x, y, mi.Indexed.At(x, y), got.At(x, y))
					}
				}
			}
		}
		v := Vectors{Nx: l.Nx, Ny: l.Ny, X: l.X, Y: l.Y, U: l.Values, V: l.Values}
		if m, err := RenderVectors(v, nil, VectorOptions{}); err == nil {
			if m.Image == nil {
				t.Fatal("no error and no image")
			}
			if b := m.Image.Bounds(); m.Picture.Empty() || !m.Picture.In(b) || !(m.ScaleX > 0) || !(m.ScaleY > 0) {
				t.Fatalf("vector picture %v at scale %g×%g in an image of %v", m.Picture, m.ScaleX, m.ScaleY, b)
			}
			checkPNG(t, m.Image)
		}
	})
}

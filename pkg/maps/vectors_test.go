package maps

import (
	"image/color"
	"math"
	"strings"
	"testing"
)

// TestVectorArrow draws one known arrow and checks its pixels: the shaft
// and head carry the arrow colour along the displacement direction, pixels
// to the side and beyond the tip keep the background.
func TestVectorArrow(t *testing.T) {
	col := color.RGBA{R: 0xe6, G: 0x9f, B: 0x00, A: 0xff}
	for _, tt := range []struct {
		name   string
		u, v   float64
		scale  float64
		length float64 // expected drawn length in px
	}{
		{"right", 10, 0, 2, 20},
		{"down-left", -6, 8, 1.5, 15},
	} {
		t.Run(tt.name, func(t *testing.T) {
			vs := Vectors{Nx: 1, Ny: 1, X: []float64{40}, Y: []float64{32}, U: []float64{tt.u}, V: []float64{tt.v}, Step: 8}
			m, err := RenderVectors(vs, flatGray(80, 64, 128), VectorOptions{Scale: tt.scale, Every: 1})
			if err != nil {
				t.Fatal(err)
			}
			if m.Scale != tt.scale || m.Every != 1 {
				t.Errorf("Scale, Every = %v, %v; want %v, 1", m.Scale, m.Every, tt.scale)
			}
			img := decode(t, m.Image)
			x0, y0 := m.OutputPoint(40, 32)
			d := math.Hypot(tt.u, tt.v)
			ux, uy := tt.u/d, tt.v/d
			at := func(s, n float64) color.Color { // along s, across n
				return img.At(int(math.Round(x0+s*ux-n*uy)), int(math.Round(y0+s*uy+n*ux)))
			}
			for _, s := range []float64{0.3 * tt.length, 0.5 * tt.length, 0.85 * tt.length} {
				if c := at(s, 0); !near(c, color.NRGBA{R: col.R, G: col.G, B: col.B}, 40) {
					t.Errorf("arrow pixel at %.1f px along = %v; want the arrow colour %v", s, c, col)
				}
			}
			bgc := color.NRGBA{R: 128, G: 128, B: 128}
			for _, p := range [][2]float64{{0.5 * tt.length, 7}, {0.5 * tt.length, -7}, {tt.length + 5, 0}, {-5, 0}} {
				if c := at(p[0], p[1]); !near(c, bgc, 0) {
					t.Errorf("pixel at (%.1f along, %.1f across) = %v; want background", p[0], p[1], c)
				}
			}
			// The legend holds a reference arrow in the arrow colour.
			found := false
			for y := m.Legend.Min.Y; y < m.Legend.Max.Y && !found; y++ {
				for x := m.Legend.Min.X; x < m.Legend.Max.X; x++ {
					if near(img.At(x, y), color.NRGBA{R: col.R, G: col.G, B: col.B}, 2) {
						found = true
						break
					}
				}
			}
			if !found || m.Reference <= 0 {
				t.Errorf("no reference arrow in the legend %v (reference %v px)", m.Legend, m.Reference)
			}
		})
	}
}

// TestVectorAuto checks the automatic scale (99th-percentile arrow is 0.9
// of the arrow spacing), thinning, and that invalid points draw nothing.
func TestVectorAuto(t *testing.T) {
	nx, ny := 30, 20
	vs := Vectors{Nx: nx, Ny: ny}
	for j := 0; j < ny; j++ {
		for i := 0; i < nx; i++ {
			x, y := 10+4*float64(i), 10+4*float64(j)
			u := 0.5
			if i < 10 {
				u = math.NaN()
			}
			vs.X, vs.Y, vs.U, vs.V = append(vs.X, x), append(vs.Y, y), append(vs.U, u), append(vs.V, 0)
		}
	}
	m, err := RenderVectors(vs, flatGray(140, 100, 128), VectorOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if m.Every != 4 { // ⌈16 / 4⌉
		t.Errorf("Every = %d; want 4 for a 4 px step", m.Every)
	}
	if want := 0.9 * 4 * 4 / 0.5; math.Abs(m.Scale-want) > 1e-9 {
		t.Errorf("Scale = %v; want %v (Step estimated as 4 px)", m.Scale, want)
	}
	img := decode(t, m.Image)
	for y := 0; y < 100; y++ { // the invalid left third stays background
		for x := 0; x < 46; x++ {
			ox, oy := m.OutputPoint(float64(x), float64(y))
			if c := img.At(int(ox), int(oy)); !near(c, color.NRGBA{R: 128, G: 128, B: 128}, 0) {
				t.Fatalf("pixel at image (%d, %d) in the invalid region = %v", x, y, c)
			}
		}
	}
}

func TestVectorErrors(t *testing.T) {
	tests := []struct {
		v    Vectors
		opt  VectorOptions
		want []string
	}{
		{Vectors{Nx: 2, Ny: 1, X: []float64{1, 2}, Y: []float64{1}, U: []float64{0, 0}, V: []float64{0, 0}}, VectorOptions{}, []string{"Y: 1 entries"}},
		{Vectors{Nx: 1, Ny: 1, X: []float64{1}, Y: []float64{1}, U: []float64{math.Inf(1)}, V: []float64{0}}, VectorOptions{Scale: -1, Every: -2}, []string{"NaN", "scale", "every"}},
	}
	for _, tt := range tests {
		_, err := RenderVectors(tt.v, nil, tt.opt)
		if err == nil {
			t.Errorf("%+v: no error", tt.v)
			continue
		}
		for _, w := range tt.want {
			if !strings.Contains(err.Error(), w) {
				t.Errorf("error %q does not mention %q", err, w)
			}
		}
	}
}

// BenchmarkRenderVectors draws about 1900 arrows on a 2048×1536 image.
func BenchmarkRenderVectors(b *testing.B) {
	nx, ny := 100, 75
	v := Vectors{Nx: nx, Ny: ny, Step: 20}
	for j := 0; j < ny; j++ {
		for i := 0; i < nx; i++ {
			x, y := 24+20*float64(i), 24+20*float64(j)
			v.X, v.Y, v.U, v.V = append(v.X, x), append(v.Y, y), append(v.U, 0.01*(x-1000)), append(v.V, 0.005*(y-700))
		}
	}
	bg := flatGray(2048, 1536, 100)
	b.ResetTimer()
	for range b.N {
		if _, err := RenderVectors(v, bg, VectorOptions{Every: 2}); err != nil {
			b.Fatal(err)
		}
	}
}

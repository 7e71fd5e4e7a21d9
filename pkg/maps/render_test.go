package maps

import (
	"bytes"
	"image"
	"image/color"
	"image/png"
	"math"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
)

// flatGray returns a uniform grey background of level g (8-bit).
func flatGray(w, h int, g float32) *imageio.Gray {
	img := imageio.NewGray(w, h)
	img.Bits = 8
	for i := range img.Pix {
		img.Pix[i] = g
	}
	return img
}

// linearLayer returns an nx×ny grid at x0 + step·i, y0 + step·j carrying
// f(X, Y), with NaN where hole(X, Y) is true.
func linearLayer(nx, ny int, x0, y0, step float64, f func(x, y float64) float64, hole func(x, y float64) bool) Layer {
	l := Layer{Nx: nx, Ny: ny, Step: step}
	for j := 0; j < ny; j++ {
		for i := 0; i < nx; i++ {
			x, y := x0+step*float64(i), y0+step*float64(j)
			v := f(x, y)
			if hole != nil && hole(x, y) {
				v = math.NaN()
			}
			l.X, l.Y, l.Values = append(l.X, x), append(l.Y, y), append(l.Values, v)
		}
	}
	return l
}

// decode round-trips img through EncodePNG and image/png.
func decode(t *testing.T, img image.Image) image.Image {
	t.Helper()
	b, err := EncodePNG(img)
	if err != nil {
		t.Fatal(err)
	}
	out, err := png.Decode(bytes.NewReader(b))
	if err != nil {
		t.Fatalf("decode our PNG: %v", err)
	}
	return out
}

func near(c color.Color, want color.NRGBA, tol int) bool {
	r, g, b, _ := c.RGBA()
	d := func(a uint32, w uint8) bool { x := int(a>>8) - int(w); return x >= -tol && x <= tol }
	return d(r, want.R) && d(g, want.G) && d(b, want.B)
}

// TestRenderLinearField renders a known linear field over the reference
// image and checks the colour at chosen pixels against the colour map at the
// value the field has there. A linear field is reproduced exactly by
// bilinear interpolation (common practice), so any difference beyond 8-bit
// rounding is an error in placement or interpolation.
func TestRenderLinearField(t *testing.T) {
	f := func(x, y float64) float64 { return 1e-3*(x-80) - 5e-4*(y-60) }
	hole := func(x, y float64) bool { return math.Hypot(x-100, y-70) < 12 }
	l := linearLayer(17, 12, 16, 16, 8, f, hole)
	bg := flatGray(160, 120, 90)
	for _, tt := range []struct {
		name string
		opt  Options
	}{
		{"viridis", Options{Quantity: "zncc", Range: [2]float64{-0.1, 0.1}}},
		{"coolwarm two-slope", Options{Quantity: "E11", Unit: "", Range: [2]float64{-0.05, 0.1}}},
		{"scaled", Options{Quantity: "E11", Colormap: "cividis", Range: [2]float64{-0.1, 0.1}, MaxWidth: 280}},
	} {
		t.Run(tt.name, func(t *testing.T) {
			m, err := Render(l, bg, tt.opt)
			if err != nil {
				t.Fatal(err)
			}
			img := decode(t, m.Image)
			norm := Norm{Lo: m.Range[0], Hi: m.Range[1], Diverging: m.Colormap.Diverging}
			if m.Range != tt.opt.Range {
				t.Errorf("Range = %v; want %v", m.Range, tt.opt.Range)
			}
			checked := 0
			for _, p := range [][2]float64{{20, 20}, {40.5, 33}, {70, 90}, {130, 24}, {140, 100}, {60, 60}} {
				ox, oy := m.OutputPoint(p[0], p[1])
				px := image.Pt(int(math.Round(ox)), int(math.Round(oy)))
				x, y := m.ImagePoint(px) // the image point at that pixel's centre
				want := m.Colormap.At(norm.T(f(x, y)))
				if !near(img.At(px.X, px.Y), want, 1) {
					t.Errorf("pixel %v (image %.2f, %.2f, value %.5f) = %v; want %v", px, x, y, f(x, y), img.At(px.X, px.Y), want)
				}
				checked++
			}
			// Inside the hole and outside the grid the background shows.
			for _, p := range [][2]float64{{100, 70}, {5, 5}, {155, 115}} {
				ox, oy := m.OutputPoint(p[0], p[1])
				c := img.At(int(math.Round(ox)), int(math.Round(oy)))
				if !near(c, color.NRGBA{R: 90, G: 90, B: 90}, 0) {
					t.Errorf("invalid/uncovered image point %v = %v; want the background grey 90", p, c)
				}
			}
			if tt.opt.MaxWidth > 0 && m.Image.Bounds().Dx() > tt.opt.MaxWidth {
				t.Errorf("width %d exceeds MaxWidth %d", m.Image.Bounds().Dx(), tt.opt.MaxWidth)
			}
		})
	}
}

// TestRenderDeformed places each reference cell at deformed positions
// x = X + u for an affine motion u = G·(X − c) and checks that a pixel of
// the deformed image shows the value of the material point that moved there
// (found by inverting the motion).
func TestRenderDeformed(t *testing.T) {
	g := [2][2]float64{{0.08, 0.05}, {-0.04, 0.03}} // ∂u/∂X
	c := [2]float64{80, 60}
	f := func(x, y float64) float64 { return 2e-3 * (x - 40) }
	l := linearLayer(15, 10, 24, 24, 8, f, nil)
	for k := range l.X {
		dx, dy := l.X[k]-c[0], l.Y[k]-c[1]
		l.X[k] += g[0][0]*dx + g[0][1]*dy
		l.Y[k] += g[1][0]*dx + g[1][1]*dy
	}
	m, err := Render(l, flatGray(160, 120, 60), Options{Quantity: "E11", Range: [2]float64{-0.2, 0.2}})
	if err != nil {
		t.Fatal(err)
	}
	img := decode(t, m.Image)
	norm := Norm{Lo: -0.2, Hi: 0.2, Diverging: true}
	// F = I + G; X = c + F⁻¹(x − c).
	a, b, cc, d := 1+g[0][0], g[0][1], g[1][0], 1+g[1][1]
	det := a*d - b*cc
	for _, x := range [][2]float64{{60, 50}, {100, 70}, {85, 40}} {
		px, py := m.OutputPoint(x[0], x[1])
		p := image.Pt(int(math.Round(px)), int(math.Round(py)))
		xi, yi := m.ImagePoint(p)
		rx, ry := xi-c[0], yi-c[1]
		X := c[0] + (d*rx-b*ry)/det
		Y := c[1] + (-cc*rx+a*ry)/det
		want := m.Colormap.At(norm.T(f(X, Y)))
		if !near(img.At(p.X, p.Y), want, 1) {
			t.Errorf("deformed point (%.1f, %.1f) from X = (%.2f, %.2f): %v; want %v", xi, yi, X, Y, img.At(p.X, p.Y), want)
		}
	}
}

// TestColorBar checks that the bar region shows the map's colours in order:
// L* of a sequential map falls strictly from top (high) to bottom (low) over
// the bar, at the centre column, and spans most of the map's L* range.
func TestColorBar(t *testing.T) {
	l := linearLayer(5, 5, 10, 10, 10, func(x, y float64) float64 { return x }, nil)
	m, err := Render(l, flatGray(64, 64, 128), Options{Quantity: "zncc", Unit: "mm", Title: "test"})
	if err != nil {
		t.Fatal(err)
	}
	img := decode(t, m.Image)
	bar := m.ColorBar
	if bar.Dy() < 50 || bar.Dx() < 8 {
		t.Fatalf("colour bar %v is too small", bar)
	}
	x := (bar.Min.X + bar.Max.X) / 2
	prev := math.Inf(1)
	var first, last float64
	for y := bar.Min.Y; y < bar.Max.Y; y++ {
		r, g, b, _ := img.At(x, y).RGBA()
		L := rgbToLab([3]float64{float64(r>>8) / 255, float64(g>>8) / 255, float64(b>>8) / 255})[0]
		if L > prev+1e-9 {
			t.Fatalf("bar L* rises at row %d: %.3f after %.3f", y-bar.Min.Y, L, prev)
		}
		if y == bar.Min.Y {
			first = L
		}
		last, prev = L, L
	}
	if first-last < 60 {
		t.Errorf("bar L* spans %.1f … %.1f; want most of viridis' range", last, first)
	}
	// The auto range of values 10..50 (1st–99th percentile).
	if !m.AutoRange || m.Range[0] < 10 || m.Range[1] > 50 || m.Range[1]-m.Range[0] < 35 {
		t.Errorf("auto range %v (auto=%v); want about [10, 50]", m.Range, m.AutoRange)
	}
	// Text was drawn next to the bar (tick labels in ink).
	dark := 0
	for y := bar.Min.Y; y < bar.Max.Y; y++ {
		for x := bar.Max.X + tickLen + 2; x < m.Image.Bounds().Max.X; x++ {
			if r, _, _, _ := img.At(x, y).RGBA(); r < 0x4000 {
				dark++
			}
		}
	}
	if dark < 20 {
		t.Errorf("only %d dark pixels beside the bar; want tick labels", dark)
	}
}

// TestRenderDeterministic renders twice and compares bytes.
func TestRenderDeterministic(t *testing.T) {
	l := linearLayer(9, 9, 8, 8, 6, func(x, y float64) float64 { return math.Sin(x/9) * y }, nil)
	bg := flatGray(64, 64, 30)
	var out [2][]byte
	for i := range out {
		m, err := Render(l, bg, Options{Quantity: "E12", Opacity: 0.7, Note: "note", ScaleBar: ScaleBar{MMPerPx: 0.01}})
		if err != nil {
			t.Fatal(err)
		}
		if out[i], err = EncodePNG(m.Image); err != nil {
			t.Fatal(err)
		}
	}
	if !bytes.Equal(out[0], out[1]) {
		t.Error("two renders of the same input differ")
	}
}

// TestOpacity checks source-over compositing: c·α + background·(1 − α)
// (Porter & Duff 1984, "Compositing digital images", Computer Graphics
// 18(3):253; reference from memory).
func TestOpacity(t *testing.T) {
	l := linearLayer(3, 3, 10, 10, 10, func(x, y float64) float64 { return 1 }, nil)
	m, err := Render(l, flatGray(40, 40, 200), Options{Colormap: "viridis", Range: [2]float64{0, 1}, Opacity: 0.5})
	if err != nil {
		t.Fatal(err)
	}
	ox, oy := m.OutputPoint(20, 20)
	c := Viridis().At(1)
	mix := func(a uint8) uint8 { return uint8(math.Round(0.5*float64(a) + 0.5*200)) }
	want := color.NRGBA{R: mix(c.R), G: mix(c.G), B: mix(c.B), A: 255}
	if got := m.Image.At(int(ox), int(oy)); !near(got, want, 2) {
		t.Errorf("half-opaque pixel = %v; want %v", got, want)
	}
}

func TestRenderErrors(t *testing.T) {
	good := linearLayer(3, 3, 10, 10, 10, func(x, y float64) float64 { return x }, nil)
	bad := good
	bad.Values = bad.Values[:5]
	allNaN := linearLayer(2, 2, 0, 0, 1, func(x, y float64) float64 { return math.NaN() }, nil)
	tests := []struct {
		name string
		l    Layer
		bg   *imageio.Gray
		opt  Options
		want []string
	}{
		{"lengths", bad, nil, Options{}, []string{"Values: 5 entries"}},
		{"several", Layer{Nx: 0, Ny: 2, Step: -1}, nil, Options{Colormap: "jet", Range: [2]float64{2, 1}, Opacity: 2, MaxWidth: -1},
			[]string{"grid", "step", "colour map", "range", "opacity", "max width"}},
		{"no values", allNaN, nil, Options{}, []string{"no finite values"}},
		{"bad background", good, &imageio.Gray{W: 10, H: 10, Stride: 10}, Options{}, []string{"background image"}},
		{"narrow", good, nil, Options{MaxWidth: 50}, []string{"max width"}},
		{"too wide", Layer{Nx: 2, Ny: 1, X: []float64{0, 1}, Y: []float64{0, 0}, Values: []float64{-1e308, 1e308}}, nil, Options{Quantity: "E11"}, []string{"too wide"}},
		{"inf", linearLayer(2, 2, 0, 0, 1, func(x, y float64) float64 { return math.Inf(1) }, nil), nil, Options{}, []string{"NaN"}},
	}
	for _, tt := range tests {
		_, err := Render(tt.l, tt.bg, tt.opt)
		if err == nil {
			t.Errorf("%s: no error", tt.name)
			continue
		}
		for _, w := range tt.want {
			if !strings.Contains(err.Error(), w) {
				t.Errorf("%s: error %q does not mention %q", tt.name, err, w)
			}
		}
	}
}

// TestGrayScale checks the background conversion: native scale for a
// 16-bit image, own range for a computed one.
func TestGrayScale(t *testing.T) {
	g := imageio.NewGray(2, 1)
	g.Bits = 16
	g.Pix[0], g.Pix[1] = 0, 65535
	out := grayToImage(g)
	if out.Pix[0] != 0 || out.Pix[1] != 255 {
		t.Errorf("16-bit → %v; want [0 255]", out.Pix)
	}
	g.Bits = 0
	g.Pix[0], g.Pix[1] = 10, 20
	if out := grayToImage(g); out.Pix[0] != 0 || out.Pix[1] != 255 {
		t.Errorf("computed → %v; want [0 255]", out.Pix)
	}
}

// TestOverlay checks the field-only image: same colours as Render at image
// resolution, transparent where a corner is invalid.
func TestOverlay(t *testing.T) {
	f := func(x, y float64) float64 { return 0.01 * (x - 30) }
	l := linearLayer(6, 6, 5, 5, 10, f, func(x, y float64) bool { return x == 55 && y == 55 })
	img, lo, hi, err := Overlay(l, 64, 64, Options{Quantity: "E22"})
	if err != nil {
		t.Fatal(err)
	}
	if lo != -hi || hi <= 0 {
		t.Errorf("auto range %v, %v; want symmetric about zero for a strain", lo, hi)
	}
	norm := Norm{Lo: lo, Hi: hi, Diverging: true}
	if got, want := img.NRGBAAt(17, 22), CoolWarm().At(norm.T(f(17, 22))); got != want {
		t.Errorf("overlay (17, 22) = %v; want %v", got, want)
	}
	for _, p := range [][2]int{{50, 50}, {2, 2}, {60, 10}} {
		if a := img.NRGBAAt(p[0], p[1]).A; a != 0 {
			t.Errorf("overlay %v alpha %d; want transparent", p, a)
		}
	}
	if _, _, _, err := Overlay(l, 0, 10, Options{}); err == nil {
		t.Error("Overlay of size 0×10 succeeded")
	}
}

// TestSizeLimit checks that positions far outside any image give an error
// instead of a huge allocation.
func TestSizeLimit(t *testing.T) {
	l := Layer{Nx: 2, Ny: 1, X: []float64{0, 1e12}, Y: []float64{0, 0}, Values: []float64{1, 2}}
	if _, err := Render(l, nil, Options{}); err == nil || !strings.Contains(err.Error(), "exceeds") {
		t.Errorf("Render with a point at x = 1e12: %v; want a size-limit error", err)
	}
}

// BenchmarkRender renders a 2048×1536 map of a 200×150 grid, scaled to
// 1200 px wide.
func BenchmarkRender(b *testing.B) {
	bg := flatGray(2048, 1536, 100)
	l := linearLayer(200, 150, 30, 30, 10, func(x, y float64) float64 { return 1e-5 * (x - y) }, nil)
	for k := range l.X {
		l.X[k] += 0.02 * l.Y[k] // deformed positions: sheared cells
	}
	b.ResetTimer()
	for range b.N {
		if _, err := Render(l, bg, Options{Quantity: "E12", MaxWidth: 1200}); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkRenderFull renders the same map at full resolution.
func BenchmarkRenderFull(b *testing.B) {
	bg := flatGray(2048, 1536, 100)
	l := linearLayer(200, 150, 30, 30, 10, func(x, y float64) float64 { return 1e-5 * (x - y) }, nil)
	b.ResetTimer()
	for range b.N {
		if _, err := Render(l, bg, Options{Quantity: "E12"}); err != nil {
			b.Fatal(err)
		}
	}
}

// TestRangeNote: the note under the colour bar names the quantity whose
// magnitude set a symmetric automatic range. It used to read "|v|" on every
// map, which on an E11 map reads as the magnitude of the displacement v.
func TestRangeNote(t *testing.T) {
	for _, tc := range []struct {
		q               string
		auto, diverging bool
		want            string
	}{
		{"E11", true, true, "auto: ±99th pct of |E11|"},
		{"u", true, true, "auto: ±99th pct of |u|"},
		{"", true, true, "auto: ±99th pct of |value|"},
		{"zncc", true, false, "auto: 1st–99th pct"},
		{"E11", false, true, "fixed range"},
	} {
		if got := rangeNote(tc.q, tc.auto, tc.diverging); got != tc.want {
			t.Errorf("rangeNote(%q, %v, %v) = %q, want %q", tc.q, tc.auto, tc.diverging, got, tc.want)
		}
	}
}

package maps

import (
	"bytes"
	"image"
	"image/png"
	"math"
	"strings"
	"testing"
)

// decodePNG decodes b and counts the pixels that are not white.
func decodePNG(t *testing.T, b []byte) (image.Image, int) {
	t.Helper()
	img, err := png.Decode(bytes.NewReader(b))
	if err != nil {
		t.Fatalf("decode plot PNG: %v", err)
	}
	n := 0
	r := img.Bounds()
	for y := r.Min.Y; y < r.Max.Y; y++ {
		for x := r.Min.X; x < r.Max.X; x++ {
			if cr, cg, cb, _ := img.At(x, y).RGBA(); cr < 0xf000 || cg < 0xf000 || cb < 0xf000 {
				n++
			}
		}
	}
	return img, n
}

// TestCurvePlot checks that a plot of several series comes out as a PNG of
// the requested size with drawn content, and that the coloured series reach
// the plot (pixels of the first palette colour are present).
func TestCurvePlot(t *testing.T) {
	var x, y1, y2 []float64
	for i := 0; i <= 20; i++ {
		x = append(x, float64(i))
		y1 = append(y1, 1e-3*float64(i))
		y2 = append(y2, -3e-4*float64(i))
	}
	y2[5] = math.NaN() // left out, not an error
	for _, sz := range [][2]int{{0, 0}, {640, 400}, {333, 211}} {
		p := CurvePlot{Title: "gauges", XLabel: "frame", YLabel: "strain", YUnit: "–", Width: sz[0], Height: sz[1],
			Series: []Series{{Name: "E11 gauge A", X: x, Y: y1}, {Name: "E22 gauge A", X: x, Y: y2, Style: StylePoints}}}
		b, err := p.PNG()
		if err != nil {
			t.Fatal(err)
		}
		img, ink := decodePNG(t, b)
		w, h := sz[0], sz[1]
		if w == 0 {
			w, h = 800, 600
		}
		if got := img.Bounds().Size(); got != image.Pt(w, h) {
			t.Errorf("plot size %v; want %dx%d", got, w, h)
		}
		if frac := float64(ink) / float64(w*h); frac < 0.01 || frac > 0.5 {
			t.Errorf("%.3f of the pixels are drawn; want a non-blank plot (1–50 %%)", frac)
		}
		blue := 0
		for yy := 0; yy < h; yy++ {
			for xx := 0; xx < w; xx++ {
				r, g, b, _ := img.At(xx, yy).RGBA()
				if r>>8 < 40 && g>>8 > 90 && g>>8 < 140 && b>>8 > 150 {
					blue++
				}
			}
		}
		if blue < 50 {
			t.Errorf("only %d pixels of the first series colour", blue)
		}
		again, _ := p.PNG()
		if !bytes.Equal(b, again) {
			t.Error("two plots of the same input differ")
		}
	}
}

// TestStressStrainPlot builds the lines of an invented linear-elastic,
// then hardening curve (demo data) and checks their geometry: the offset
// line is the fit line shifted by the offset in strain, both start at zero
// stress and end at the largest stress.
func TestStressStrainPlot(t *testing.T) {
	const E, off = 200e3, 0.002 // MPa, dimensionless
	var e, s []float64
	for i := 0; i <= 40; i++ {
		x := 0.0002 * float64(i)
		y := E * x
		if x > 0.002 {
			y = 400 + 2e3*(x-0.002)
		}
		e, s = append(e, x), append(s, y)
	}
	ss := StressStrain{Title: "specimen BW-07 (invented)", Strain: e, Stress: s, Modulus: E, FitRange: [2]float64{0.0002, 0.0015},
		Offset: off, Yield: [2]float64{0.00401, 404}}
	p := ss.Plot()
	if len(p.Series) != 4 || len(p.Markers) != 1 {
		t.Fatalf("%d series, %d markers; want measured, fit, extension, offset and one marker", len(p.Series), len(p.Markers))
	}
	fit, ext, ofl := p.Series[1], p.Series[2], p.Series[3]
	if !strings.Contains(fit.Name, "E = 200 GPa") {
		t.Errorf("fit legend %q does not state the modulus", fit.Name)
	}
	top := s[len(s)-1]
	for i := range 2 {
		if d := ofl.X[i] - ext.X[i]; math.Abs(d-off) > 1e-15 {
			t.Errorf("offset line shift %v; want %v", d, off)
		}
		if math.Abs(ext.Y[i]-E*ext.X[i]) > 1e-9 {
			t.Errorf("extension point (%v, %v) not on stress = E·strain", ext.X[i], ext.Y[i])
		}
	}
	if ext.Y[0] != 0 || ext.Y[1] != top {
		t.Errorf("extension spans stress %v; want 0 to %v", ext.Y, top)
	}
	b, err := p.PNG()
	if err != nil {
		t.Fatal(err)
	}
	if _, ink := decodePNG(t, b); ink < 5000 {
		t.Errorf("stress–strain plot has only %d drawn pixels", ink)
	}
}

func TestCurvePlotErrors(t *testing.T) {
	tests := []struct {
		p    CurvePlot
		want []string
	}{
		{CurvePlot{}, []string{"no series"}},
		{CurvePlot{Series: []Series{{X: []float64{1}, Y: []float64{1, 2}}}, Width: 50}, []string{"1 x values but 2", "width 50"}},
		{CurvePlot{Series: []Series{{X: []float64{math.NaN()}, Y: []float64{1}}}}, []string{"no finite"}},
		{CurvePlot{Series: []Series{{X: []float64{1}, Y: []float64{1}}}, Markers: []Marker{{X: math.Inf(1)}}}, []string{"marker"}},
	}
	for _, tt := range tests {
		_, err := tt.p.PNG()
		if err == nil {
			t.Errorf("%+v: no error", tt.p)
			continue
		}
		for _, w := range tt.want {
			if !strings.Contains(err.Error(), w) {
				t.Errorf("error %q does not mention %q", err, w)
			}
		}
	}
}

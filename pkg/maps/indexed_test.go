package maps

import (
	"image"
	"image/color"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
)

// stepError returns the largest difference in any channel between the
// colour of cm at t and the colour of the indexed map's nearest step, over
// a fine sweep of t: what Options.Indexed gives up in the field.
func stepError(cm Colormap) int {
	worst := 0
	for i := 0; i <= 100000; i++ {
		t := float64(i) / 100000
		a := cm.At(t)
		b := cm.At(math.Round(t*(IndexedSteps-1)) / (IndexedSteps - 1))
		for _, d := range []int{int(a.R) - int(b.R), int(a.G) - int(b.G), int(a.B) - int(b.B)} {
			worst = max(worst, d, -d)
		}
	}
	return worst
}

// TestIndexedMatchesFullColour draws the same maps in full colour and
// indexed and compares every pixel: the indexed map may differ only by its
// documented precision (the colour map in IndexedSteps steps, greys within
// 2 levels), and everything else about the map (picture, colour bar,
// range) is the same. The background is a random speckle-like image, so
// every grey level occurs; the field has holes, so the background shows
// through inside the picture.
func TestIndexedMatchesFullColour(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	bg := imageio.NewGray(300, 200)
	bg.Bits = 8
	for i := range bg.Pix {
		bg.Pix[i] = float32(rng.IntN(256))
	}
	field := linearLayer(30, 20, 5, 5, 10, func(x, y float64) float64 { return 0.01 * (x - 150) / 150 * (1 + y/200) },
		func(x, y float64) bool { return math.Hypot(x-150, y-100) < 30 })
	for _, c := range []struct {
		name string
		opt  Options
		bg   *imageio.Gray
	}{
		{"diverging", Options{Quantity: "E11", Title: "E11: strain", Note: "subset 31 px"}, bg},
		{"sequential", Options{Quantity: "zncc", Colormap: "viridis"}, bg},
		{"scaled", Options{Quantity: "E11", MaxWidth: 250}, bg},
		{"no background", Options{Quantity: "u", Unit: "px"}, nil},
	} {
		t.Run(c.name, func(t *testing.T) {
			full, err := Render(field, c.bg, c.opt)
			if err != nil {
				t.Fatal(err)
			}
			c.opt.Indexed = true
			ix, err := Render(field, c.bg, c.opt)
			if err != nil {
				t.Fatal(err)
			}
			if ix.Indexed == nil || ix.Image != nil || full.Image == nil || full.Indexed != nil {
				t.Fatalf("indexed %v/%v, full colour %v/%v: want exactly one image each, of its kind", ix.Indexed != nil, ix.Image != nil, full.Indexed != nil, full.Image != nil)
			}
			if ix.Picture != full.Picture || ix.ColorBar != full.ColorBar || ix.Range != full.Range || ix.Indexed.Rect != full.Image.Rect {
				t.Fatalf("layout differs: indexed %v %v %v %v, full colour %v %v %v %v",
					ix.Indexed.Rect, ix.Picture, ix.ColorBar, ix.Range, full.Image.Rect, full.Picture, full.ColorBar, full.Range)
			}
			colour := stepError(full.Colormap)
			if colour > 6 {
				t.Fatalf("colour map %s: steps differ by up to %d levels; IndexedSteps is too coarse", full.Colormap.Name, colour)
			}
			tol := max(colour, 2)
			worst, at := 0, image.Point{}
			r := full.Image.Rect
			for y := r.Min.Y; y < r.Max.Y; y++ {
				for x := r.Min.X; x < r.Max.X; x++ {
					a := full.Image.RGBAAt(x, y)
					b := color.RGBAModel.Convert(ix.Indexed.At(x, y)).(color.RGBA)
					for _, d := range []int{int(a.R) - int(b.R), int(a.G) - int(b.G), int(a.B) - int(b.B)} {
						if d < 0 {
							d = -d
						}
						if d > worst {
							worst, at = d, image.Pt(x, y)
						}
					}
				}
			}
			if worst > tol {
				t.Errorf("pixel %v differs by %d levels (full colour %v, indexed %v); want at most %d",
					at, worst, full.Image.RGBAAt(at.X, at.Y), ix.Indexed.At(at.X, at.Y), tol)
			}
			t.Logf("largest difference %d levels (colour map steps %d)", worst, colour)
			// The indexed map is what it says: every pixel one of the 256 colours.
			if got := decode(t, ix.Raster()).(*image.Paletted); len(got.Palette) != 256 {
				t.Errorf("decoded indexed PNG has %d colours; want 256", len(got.Palette))
			}
		})
	}
	// A translucent map cannot be indexed: it is drawn in full colour.
	m, err := Render(field, bg, Options{Quantity: "E11", Opacity: 0.5, Indexed: true})
	if err != nil {
		t.Fatal(err)
	}
	if m.Image == nil || m.Indexed != nil || m.Raster() != image.Image(m.Image) {
		t.Errorf("opacity 0.5 with Indexed: want the full-colour image")
	}
}

// TestFillRectCell checks that the rectangular-cell fill gives, bit for
// bit, the per-pixel bilinear values of its definition (Render's
// interpolation) on random cells, with and without steps, leaving pixels
// already written alone.
func TestFillRectCell(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	const pw, ph = 40, 30
	for trial := 0; trial < 200; trial++ {
		x0, y0 := rng.Float64()*30-3, rng.Float64()*20-3
		w, h := 0.5+rng.Float64()*12, 0.5+rng.Float64()*12
		q := [4][2]float64{{x0, y0}, {x0 + w, y0}, {x0 + w, y0 + h}, {x0, y0 + h}}
		v := [4]float64{rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64()}
		steps := trial%2 == 1
		got := make([]float64, pw*ph)
		for i := range got {
			got[i] = math.NaN()
			if rng.IntN(10) == 0 {
				got[i] = 7 // written by an earlier cell
			}
		}
		want := append([]float64(nil), got...)
		fillCell(got, pw, ph, q, v, steps)
		for py := 0; py < ph; py++ {
			for px := 0; px < pw; px++ {
				X, Y := float64(px), float64(py)
				if X < q[0][0]-1e-9 || X > q[1][0]+1e-9 || Y < q[0][1]-1e-9 || Y > q[3][1]+1e-9 || !math.IsNaN(want[py*pw+px]) {
					continue
				}
				a := math.Max(0, math.Min(1, (X-q[0][0])/(q[1][0]-q[0][0])))
				b := math.Max(0, math.Min(1, (Y-q[0][1])/(q[3][1]-q[0][1])))
				if steps {
					want[py*pw+px] = v[[2][2]int{{0, 3}, {1, 2}}[int(math.Round(a))][int(math.Round(b))]]
				} else {
					want[py*pw+px] = (1-a)*(1-b)*v[0] + a*(1-b)*v[1] + a*b*v[2] + (1-a)*b*v[3]
				}
			}
		}
		for i := range got {
			if math.Float64bits(got[i]) != math.Float64bits(want[i]) && !(math.IsNaN(got[i]) && math.IsNaN(want[i])) {
				t.Fatalf("trial %d, pixel %d,%d: %v, want %v", trial, i%pw, i/pw, got[i], want[i])
			}
		}
	}
}

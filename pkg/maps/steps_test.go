package maps

import (
	"math"
	"testing"
)

// TestBinaryMapSteps: a valid/eps_valid map (values 0 and 1) is drawn as
// sharp steps: every field pixel is exactly the colour of 0 or of 1, never
// a blend, with the step half-way between grid points, and the automatic
// range is [0, 1] even when a map holds only ones. A strain map of the same
// values is still interpolated (blended colours in between).
func TestBinaryMapSteps(t *testing.T) {
	// 0 on the points with X < 48, 1 from X = 48 on (grid step 8 from 16).
	l := linearLayer(9, 6, 16, 16, 8, func(x, y float64) float64 {
		if x < 48 {
			return 0
		}
		return 1
	}, nil)
	bg := flatGray(96, 72, 90)
	for _, q := range []string{"valid", "eps_valid"} {
		m, err := Render(l, bg, Options{Quantity: q})
		if err != nil {
			t.Fatal(err)
		}
		if m.Range != [2]float64{0, 1} {
			t.Errorf("%s: range %v, want [0, 1]", q, m.Range)
		}
		c0, c1 := m.Colormap.At(0), m.Colormap.At(1)
		img := decode(t, m.Image)
		for y := 17.0; y < 55; y += 3 {
			for x := 16.5; x < 80; x += 1 {
				ox, oy := m.OutputPoint(x, y)
				c := img.At(int(math.Round(ox)), int(math.Round(oy)))
				// The step lies half-way between X = 40 and X = 48.
				want := c1
				if x < 44 {
					want = c0
				}
				if math.Abs(x-44) > 0.6 && !near(c, want, 0) {
					t.Fatalf("%s: pixel at image (%.1f, %.0f) is %v, want %v (the colour of %v)", q, x, y, c, want, map[bool]int{true: 0, false: 1}[x < 44])
				}
			}
		}
	}
	// Only ones: still the range [0, 1], all pixels the colour of 1.
	ones := linearLayer(4, 4, 16, 16, 8, func(x, y float64) float64 { return 1 }, nil)
	m, err := Render(ones, bg, Options{Quantity: "valid"})
	if err != nil || m.Range != [2]float64{0, 1} {
		t.Fatalf("all-valid map: range %v, %v", m.Range, err)
	}
	// A continuous quantity with the same values keeps its interpolation.
	m, err = Render(l, bg, Options{Quantity: "zncc", Range: [2]float64{0, 1}})
	if err != nil {
		t.Fatal(err)
	}
	ox, oy := m.OutputPoint(44, 30)
	if c := decode(t, m.Image).At(int(math.Round(ox)), int(math.Round(oy))); !near(c, m.Colormap.At(0.5), 2) {
		t.Errorf("zncc map half-way between 0 and 1 is %v, want the colour of 0.5 %v", c, m.Colormap.At(0.5))
	}
	// Steps can be asked for any quantity.
	m, err = Render(l, bg, Options{Quantity: "zncc", Range: [2]float64{0, 1}, Steps: true})
	if err != nil {
		t.Fatal(err)
	}
	ox, oy = m.OutputPoint(43, 30)
	if c := decode(t, m.Image).At(int(math.Round(ox)), int(math.Round(oy))); !near(c, m.Colormap.At(0), 0) {
		t.Errorf("stepped zncc map just before the step is %v, want the colour of 0 %v", c, m.Colormap.At(0))
	}
	// Overlay follows the same rule.
	ov, lo, hi, err := Overlay(l, 96, 72, Options{Quantity: "valid"})
	if err != nil || lo != 0 || hi != 1 {
		t.Fatalf("overlay: [%v, %v], %v", lo, hi, err)
	}
	if c := ov.At(43, 30); !near(c, m.Colormap.At(0), 0) {
		t.Errorf("overlay pixel (43, 30) is %v, want the colour of 0", c)
	}
}

// TestPrincipalAngleDiverging: E_max_angle_deg, a signed angle in
// (−90°, 90°], gets the diverging map centred on 0° (Moreland 2009): the
// automatic range is symmetric and 0° takes the map's centre colour.
func TestPrincipalAngleDiverging(t *testing.T) {
	cm := ForQuantity("E_max_angle_deg")
	if !cm.Diverging || cm.Name != NameCoolWarm {
		t.Fatalf("E_max_angle_deg colour map %q (diverging %v), want %q", cm.Name, cm.Diverging, NameCoolWarm)
	}
	l := linearLayer(9, 6, 16, 16, 8, func(x, y float64) float64 { return (x - 48) * 2 }, nil) // −64° … 64°, 0° at X = 48
	m, err := Render(l, flatGray(96, 72, 90), Options{Quantity: "E_max_angle_deg"})
	if err != nil {
		t.Fatal(err)
	}
	if m.Range[0] != -m.Range[1] {
		t.Errorf("range %v is not symmetric about 0°", m.Range)
	}
	ox, oy := m.OutputPoint(48, 30)
	if c := decode(t, m.Image).At(int(math.Round(ox)), int(math.Round(oy))); !near(c, cm.At(0.5), 1) {
		t.Errorf("0° is drawn %v, want the centre colour %v", c, cm.At(0.5))
	}
}

package maps_test

import (
	"fmt"
	"math"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/maps"
)

// ExampleRender draws a strain map over a reference image and encodes it.
func ExampleRender() {
	ref := imageio.NewGray(200, 150) // stands in for a decoded reference image
	ref.Bits = 8
	for i := range ref.Pix {
		ref.Pix[i] = 128
	}
	// A 20×15 grid of points every 8 px, carrying an invented E11 field.
	l := maps.Layer{Nx: 20, Ny: 15, Step: 8}
	for j := 0; j < l.Ny; j++ {
		for i := 0; i < l.Nx; i++ {
			x, y := 20+8*float64(i), 16+8*float64(j)
			l.X, l.Y = append(l.X, x), append(l.Y, y)
			v := 1e-4 * (x - 100)
			if x > 150 && y > 100 {
				v = math.NaN() // an invalid corner: left transparent
			}
			l.Values = append(l.Values, v)
		}
	}
	m, err := maps.Render(l, ref, maps.Options{
		Quantity: "E11",
		Title:    "E11 (Green–Lagrange) on the reference image",
		Note:     "Map for reading only; confirm values with a calibrated extensometer.",
		ScaleBar: maps.ScaleBar{MMPerPx: 0.05},
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	png, err := maps.EncodePNG(m.Image)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("%s %.4g %v\n", m.Colormap.Name, m.Range, len(png) > 0)
	// Output: coolwarm [-0.008 0.008] true
}

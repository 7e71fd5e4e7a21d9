package quality_test

import (
	"context"
	"math"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
)

// FuzzMeasure: any small image, including uniform, tiny, saturated or
// holding NaN, gives measures or an error, never a panic, and the subset
// chooser likewise.
func FuzzMeasure(f *testing.F) {
	f.Add(uint8(8), uint8(8), uint8(16), []byte{0, 255, 3, 128, 7, 9, 200, 1})
	f.Add(uint8(1), uint8(1), uint8(8), []byte{255})
	f.Add(uint8(20), uint8(3), uint8(12), []byte{})
	f.Fuzz(func(t *testing.T, w, h, bits uint8, data []byte) {
		g := imageio.NewGray(int(w%64), int(h%64))
		g.Bits = []int{0, 8, 12, 16}[bits%4]
		for i := range g.Pix {
			if len(data) == 0 {
				break
			}
			v := float32(data[i%len(data)])
			switch {
			case bits&16 != 0:
				v *= 257
			case bits&32 != 0 && i == 3:
				v = float32(math.NaN())
			}
			g.Pix[i] = v
		}
		m, err := quality.Measure(g, nil)
		if err == nil {
			quality.Check(m, "fuzz", quality.Thresholds{})
			quality.Compare(m, m, "fuzz", quality.Thresholds{})
		}
		quality.NoiseFromImage(g, nil)
		quality.ChooseSubset(context.Background(), g, quality.SubsetOptions{Target: 0.01, Noise: 1, Min: 3, Max: 21, Step: 3})
	})
}

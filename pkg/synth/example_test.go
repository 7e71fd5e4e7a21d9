package synth_test

import (
	"fmt"

	"github.com/mottledic/mottle/pkg/synth"
)

// A reference and a deformed image of a 2 % stretch along x, and the exact
// displacement at one reference point.
func ExamplePair() {
	m := synth.Affine{F: [2][2]float64{{1.02, 0}, {0, 0.99}}, CX: 63.5, CY: 63.5}
	ref, def, err := synth.Pair(synth.PatternOptions{Diameter: 4, Seed: 1}, m,
		synth.RenderOptions{W: 128, H: 128, Noise: 1})
	if err != nil {
		fmt.Println(err)
		return
	}
	t := synth.At(m, 100, 40)
	fmt.Printf("%d×%d and %d×%d px, %d-bit\n", ref.W, ref.H, def.W, def.H, def.Bits)
	fmt.Printf("at X = (100, 40): u = %.3f px, v = %.3f px, F11 = %.2f\n", t.U, t.V, t.F[0][0])
	// Output:
	// 128×128 and 128×128 px, 8-bit
	// at X = (100, 40): u = 0.730 px, v = 0.235 px, F11 = 1.02
}

// A motion written as text, as the CLI and truth files use it.
func ExampleParseMotion() {
	m, err := synth.ParseMotion("hole:radius_px=30,stress_MPa=200", 256, 256)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(m.Spec())
	// Output:
	// hole:E_MPa=70000,cx=127.5,cy=127.5,mm_per_px=0.01,nu=0.33,radius_px=30,stress_MPa=200
}

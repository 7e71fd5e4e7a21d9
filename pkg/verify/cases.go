package verify

import "github.com/mottledic/mottle/pkg/synth"

// CrossCases returns the standard cross-check cases: subpixel
// translations (every method's model applies, phase correlation's
// included) and homogeneous affine motions (ECC's affine model applies,
// phase correlation's does not). Images are 160×160 px, 8-bit; short
// shrinks the point grid.
func CrossCases(short bool) []Case {
	step := 16
	if short {
		step = 24
	}
	c := func(name string, m synth.Motion, subset int, noise float64, seed int64, applies ...Method) Case {
		return Case{Name: name, Motion: m, W: 160, H: 160, Subset: subset, Step: step, Margin: 8,
			Noise: noise, Seed: seed, Applies: applies}
	}
	strain := synth.Affine{F: [2][2]float64{{1.012, 0.004}, {-0.003, 0.994}}, CX: 80, CY: 80, U: 0.41, V: -0.77}
	rot := synth.Rotation{Angle: 1.5, CX: 80, CY: 80, U: -0.35, V: 0.62}
	return []Case{
		c("translation 0.37, -1.62", synth.Translation{U: 0.37, V: -1.62}, 21, 0, 1, ECC, ECCDefault, Phase, PhaseHann),
		c("translation 2.25, 0.81 noise 2", synth.Translation{U: 2.25, V: 0.81}, 21, 2, 2, ECC, ECCDefault, Phase, PhaseHann),
		c("translation 0.5, 0.5", synth.Translation{U: 0.5, V: 0.5}, 31, 0, 3, ECC, ECCDefault, Phase, PhaseHann),
		c("affine strain 1.2 %", strain, 21, 0, 4, ECC, ECCDefault),
		c("affine strain 1.2 % noise 2", strain, 31, 2, 5, ECC, ECCDefault),
		c("rotation 1.5 deg", rot, 21, 0, 6, ECC, ECCDefault),
	}
}

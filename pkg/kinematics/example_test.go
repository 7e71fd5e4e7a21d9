package kinematics_test

import (
	"context"
	"fmt"
	"math"

	"github.com/mottledic/mottle/pkg/kinematics"
)

// Strain measures of a 5 % stretch along x combined with a 10° rotation.
// E and H are referred to the reference configuration, so they show the
// stretch along x unrotated: E11 = (1.05² − 1)/2, H11 = ln 1.05. A is referred
// to the deformed configuration, so its xx component is the stretch's
// (1 − 1.05⁻²)/2 = 0.04649 times cos² 10°.
func ExampleCompute() {
	F := kinematics.Rotation(10 * math.Pi / 180).Mul(kinematics.Tensor{{1.05, 0}, {0, 1}})
	m := kinematics.Compute(F, kinematics.GreenLagrangeMeasure)
	fmt.Printf("E11 %.5f  H11 %.5f  A11 %.5f\n", m.E[0][0], m.H[0][0], m.A[0][0])
	fmt.Printf("rotation %.2f°, small strain usable: %v\n", m.RotationDeg, m.SmallStrainValid)
	// Output:
	// E11 0.05125  H11 0.04879  A11 0.04508
	// rotation 10.00°, small strain usable: false
}

// Displacement gradient of a grid by pointwise least squares.
func ExampleGradients() {
	g := kinematics.Grid{X0: 16, Y0: 16, Step: 8, Nx: 9, Ny: 9}
	u := make([]float64, g.Len())
	v := make([]float64, g.Len())
	for j := range g.Ny {
		for i := range g.Nx {
			x, y := g.At(i, j)
			u[j*g.Nx+i] = 0.002 * x // 0.2 % stretch along x
			v[j*g.Nx+i] = -0.0006 * y
		}
	}
	grads, err := kinematics.Gradients(context.Background(), g, u, v, nil, nil, kinematics.GradientOptions{Window: 5})
	if err != nil {
		fmt.Println(err)
		return
	}
	c := grads[4*g.Nx+4]
	fmt.Printf("∂u/∂X %.4f ∂v/∂Y %.4f from %d points, VSG %.0f px\n", c.Ux, c.Vy, c.N, kinematics.VSG(5, 8, 31))
	// Output:
	// ∂u/∂X 0.0020 ∂v/∂Y -0.0006 from 25 points, VSG 63 px
}

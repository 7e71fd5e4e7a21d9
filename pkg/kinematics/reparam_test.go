package kinematics

import (
	"context"
	"math"
	"testing"
)

// TestReparam: a displacement field linear in the new coordinates X = A·x
// (an affine change of coordinates, as a scale and skew of a camera would
// give) has, after Reparam with J = A, exactly the gradient it was built
// with (chain rule, any calculus text).
func TestReparam(t *testing.T) {
	A := [2][2]float64{{0.21, 0.013}, {-0.008, 0.205}} // mm per px, slightly skewed
	G := [2][2]float64{{1.5e-3, -4e-4}, {2e-4, -7e-4}} // ∂u/∂X wanted
	g := Grid{X0: 10, Y0: 12, Step: 8, Nx: 9, Ny: 7}
	n := g.Len()
	u, v := make([]float64, n), make([]float64, n)
	for j := range g.Ny {
		for i := range g.Nx {
			x, y := g.At(i, j)
			X, Y := A[0][0]*x+A[0][1]*y, A[1][0]*x+A[1][1]*y
			u[j*g.Nx+i] = G[0][0]*X + G[0][1]*Y + 0.3
			v[j*g.Nx+i] = G[1][0]*X + G[1][1]*Y - 0.1
		}
	}
	grads, err := Gradients(context.Background(), g, u, v, nil, nil, GradientOptions{Window: 5, Fit: Plane})
	if err != nil {
		t.Fatal(err)
	}
	r := grads[3*g.Nx+4].Reparam(A)
	for _, c := range []struct {
		name      string
		got, want float64
	}{{"Ux", r.Ux, G[0][0]}, {"Uy", r.Uy, G[0][1]}, {"Vx", r.Vx, G[1][0]}, {"Vy", r.Vy, G[1][1]}} {
		if math.Abs(c.got-c.want) > 1e-12 {
			t.Errorf("%s = %.15g, want %g", c.name, c.got, c.want)
		}
	}
	if bad := grads[0].Reparam([2][2]float64{{1, 2}, {2, 4}}); bad.Status != GradDegenerate || !math.IsNaN(bad.Ux) {
		t.Errorf("singular J: status %v, Ux %v", bad.Status, bad.Ux)
	}
}

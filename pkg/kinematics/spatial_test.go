package kinematics

import (
	"math"
	"testing"
)

// Under an affine motion x = c + M·X every triangle maps affinely, so
// barycentric interpolation of the reference coordinate X at the deformed
// grid reproduces the inverse map X = M⁻¹(x − c) exactly (linear
// interpolation reproduces linear functions; common practice).
func TestToDeformedAffine(t *testing.T) {
	ref := Grid{X0: 20, Y0: 24, Step: 8, Nx: 14, Ny: 11}
	M := Rotation(10 * math.Pi / 180).Mul(Tensor{{1.05, 0}, {0, 0.98}})
	c := [2]float64{3.25, -1.5}
	u, v := fillField(ref,
		func(x, y float64) float64 { return c[0] + M[0][0]*x + M[0][1]*y - x },
		func(x, y float64) float64 { return c[1] + M[1][0]*x + M[1][1]*y - y })
	X, Y := fillField(ref, func(x, y float64) float64 { return x }, func(x, y float64) float64 { return y })
	out := Grid{Step: 2, Nx: 80, Ny: 70}
	res, err := ToDeformed(ref, u, v, [][]float64{X, Y}, out)
	if err != nil {
		t.Fatal(err)
	}
	Mi, _ := M.Inv()
	covered := 0
	for j := range out.Ny {
		for i := range out.Nx {
			x, y := out.At(i, j)
			wx := Mi[0][0]*(x-c[0]) + Mi[0][1]*(y-c[1])
			wy := Mi[1][0]*(x-c[0]) + Mi[1][1]*(y-c[1])
			// Points safely inside / outside the mapped reference rectangle.
			xlo, xhi, ylo, yhi := ref.X0, ref.X0+float64(ref.Nx-1)*ref.Step, ref.Y0, ref.Y0+float64(ref.Ny-1)*ref.Step
			inside := wx > xlo+1e-6 && wx < xhi-1e-6 && wy > ylo+1e-6 && wy < yhi-1e-6
			outside := wx < xlo-1e-6 || wx > xhi+1e-6 || wy < ylo-1e-6 || wy > yhi+1e-6
			p := j*out.Nx + i
			switch {
			case inside:
				covered++
				if !near(res[0][p], wx, 1e-9) || !near(res[1][p], wy, 1e-9) {
					t.Fatalf("deformed (%v, %v): got X = (%v, %v), want (%v, %v)", x, y, res[0][p], res[1][p], wx, wy)
				}
			case outside:
				if !math.IsNaN(res[0][p]) {
					t.Fatalf("deformed (%v, %v) outside the specimen: got %v, want NaN", x, y, res[0][p])
				}
			}
		}
	}
	if covered < 1000 {
		t.Errorf("only %d deformed points covered", covered)
	}
}

// Cells with an invalid corner stay NaN; a NaN quantity at a valid point
// spreads only to the triangles that use it.
func TestToDeformedInvalid(t *testing.T) {
	ref := Grid{Step: 10, Nx: 3, Ny: 3}
	u, v := make([]float64, 9), make([]float64, 9)
	q := []float64{1, 1, 1, 1, 1, 1, 1, 1, 1}
	u[4] = math.NaN() // centre point: every cell has it as a corner
	out := Grid{Step: 1, Nx: 21, Ny: 21}
	res, err := ToDeformed(ref, u, v, [][]float64{q}, out)
	if err != nil {
		t.Fatal(err)
	}
	for p, x := range res[0] {
		if !math.IsNaN(x) {
			t.Fatalf("point %d = %v, want NaN (every cell has an invalid corner)", p, x)
		}
	}
	u[4] = 0
	q[8] = math.NaN()
	res, _ = ToDeformed(ref, u, v, [][]float64{q}, out)
	if got := res[0][5*21+5]; got != 1 {
		t.Errorf("cell (0,0) centre = %v, want 1", got)
	}
	if got := res[0][15*21+15]; !math.IsNaN(got) {
		t.Errorf("cell (1,1) centre = %v, want NaN from the NaN corner", got)
	}
	if _, err := ToDeformed(ref, u, v[:2], [][]float64{q[:4]}, Grid{}); err == nil {
		t.Error("bad input: want error")
	}
}

// ScaleFromPoints: 5 mm over the 100 px between (10, 10) and (70, 90)
// (a 3-4-5 triangle, worked by hand) is 0.05 mm/px.
func TestScale(t *testing.T) {
	s, err := ScaleFromPoints([2]float64{10, 10}, [2]float64{70, 90}, 5)
	if err != nil || !near(float64(s), 0.05, 1e-15) || s.Unit() != "mm" || !near(s.Length(20), 1, 1e-15) {
		t.Errorf("ScaleFromPoints: %v, %v", s, err)
	}
	if Scale(0).Unit() != "px" || Scale(0).Length(3) != 3 {
		t.Error("zero scale should keep px")
	}
	for _, c := range []struct {
		a, b [2]float64
		d    float64
	}{{[2]float64{1, 1}, [2]float64{1, 1}, 5}, {[2]float64{0, 0}, [2]float64{100, 0}, 0}, {[2]float64{math.NaN(), 0}, [2]float64{100, 0}, 1}} {
		if _, err := ScaleFromPoints(c.a, c.b, c.d); err == nil {
			t.Errorf("ScaleFromPoints(%v, %v, %v): want error", c.a, c.b, c.d)
		}
	}
	if Scale(-1).Validate() == nil || Scale(0.01).Validate() != nil {
		t.Error("Scale.Validate")
	}
}

// Quantities masks ε beyond the rotation limit and reports non-invertible
// points. Checks by hand: E11 = Ux + ½Ux² = 0.01005 (Holzapfel 2000); the
// std of E11 by first-order propagation, ∂E11/∂Ux = 1 + Ux, so
// std_E11 = 1.01·1e-4 (common practice).
func TestQuantities(t *testing.T) {
	r30 := Rotation(math.Pi / 6)
	grads := []Gradient{
		{Ux: 0.01, Status: GradOK, VarUx: 1e-8, VarVx: 0, VarUy: 0, VarVy: 1e-8},
		{Ux: r30[0][0] - 1, Uy: r30[0][1], Vx: r30[1][0], Vy: r30[1][1] - 1, Status: GradOK},
		{Ux: -2, Status: GradOK},
		{Status: GradTooFewNeighbours, N: 3},
	}
	q, st := Quantities(grads, GreenLagrangeMeasure)
	want := []string{"ok", "ok", StatusNonInvertible, "too_few_neighbours"}
	for p := range want {
		if st[p] != want[p] {
			t.Errorf("status[%d] = %q, want %q", p, st[p], want[p])
		}
	}
	if len(q) != len(QuantityNames()) {
		t.Errorf("%d quantities, want %d", len(q), len(QuantityNames()))
	}
	if !near(q["E11"][0], 0.01+0.00005, 1e-15) || q["eps_valid"][0] != 1 || !near(q["eps11"][0], 0.01, 1e-15) {
		t.Errorf("point 0: E11 %v eps11 %v eps_valid %v", q["E11"][0], q["eps11"][0], q["eps_valid"][0])
	}
	if !near(q["std_E11"][0], 1.01e-4, 1e-15) {
		t.Errorf("std_E11 = %v, want (1 + Ux)·std(Ux) = 1.01e-4", q["std_E11"][0])
	}
	if q["eps_valid"][1] != 0 || !math.IsNaN(q["eps11"][1]) || !near(q["rotation_deg"][1], 30, 1e-12) || !near(q["E11"][1], 0, 1e-15) {
		t.Errorf("rotated point: eps_valid %v eps11 %v rotation %v", q["eps_valid"][1], q["eps11"][1], q["rotation_deg"][1])
	}
	if !math.IsNaN(q["H11"][2]) || !near(q["detF"][2], -1, 1e-15) {
		t.Errorf("non-invertible point: H11 %v detF %v", q["H11"][2], q["detF"][2])
	}
	if !math.IsNaN(q["F11"][3]) {
		t.Errorf("failed fit: F11 = %v, want NaN", q["F11"][3])
	}
}

func BenchmarkToDeformed(b *testing.B) {
	ref := Grid{X0: 16, Y0: 16, Step: 4, Nx: 120, Ny: 120}
	u, v := fillField(ref, func(x, y float64) float64 { return 0.02*x + 1 }, func(x, y float64) float64 { return -0.01 * y })
	q := make([]float64, ref.Len())
	out := Grid{Step: 1, Nx: 512, Ny: 512}
	b.ReportAllocs()
	for b.Loop() {
		if _, err := ToDeformed(ref, u, v, [][]float64{q}, out); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(out.Len())*float64(b.N)/b.Elapsed().Seconds(), "pixels/s")
}

package kinematics

import (
	"errors"
	"fmt"
	"math"
)

// ToDeformed resamples quantities measured at the reference grid ref onto the
// regular grid out of the deformed image (the spatial, Eulerian view), for
// overlays on the deformed picture.
//
// Each reference point X carries its values to x = X + u. Every reference
// cell whose four corners have a valid (finite) displacement is split into the
// two triangles (X00, X10, X11) and (X00, X11, X01); each triangle is mapped
// to the deformed configuration, and the out points inside it receive the
// barycentric (linear) interpolation of the corner values. Out points covered
// by no such triangle, and those interpolated from a NaN corner value, are
// NaN. Where the mapping folds over itself the first triangle in row-major
// cell order wins, so the result is deterministic.
//
// u and v are in px, row-major on ref; every slice of qs has ref.Len()
// values. The result holds one slice of out.Len() values per quantity, in the
// order of qs. For a pixel-wise map of a W×H image use
// out = Grid{Step: 1, Nx: W, Ny: H}.
func ToDeformed(ref Grid, u, v []float64, qs [][]float64, out Grid) ([][]float64, error) {
	var errs []error
	if err := ref.Validate(); err != nil {
		errs = append(errs, fmt.Errorf("reference grid: %w", err))
	}
	if err := out.Validate(); err != nil {
		errs = append(errs, fmt.Errorf("deformed grid: %w", err))
	}
	n := ref.Len()
	if len(u) != n || len(v) != n {
		errs = append(errs, fmt.Errorf("u and v have %d and %d values, want %d (reference grid %d×%d)", len(u), len(v), n, ref.Nx, ref.Ny))
	}
	for k, q := range qs {
		if len(q) != n {
			errs = append(errs, fmt.Errorf("quantity %d has %d values, want %d", k, len(q), n))
		}
	}
	if err := errors.Join(errs...); err != nil {
		return nil, fmt.Errorf("deformed view: %w", err)
	}

	m := out.Len()
	res := make([][]float64, len(qs))
	for k := range res {
		res[k] = make([]float64, m)
		for p := range res[k] {
			res[k][p] = math.NaN()
		}
	}
	done := make([]bool, m)

	var xs, ys [3]float64
	var idx [3]int
	tri := func() {
		x0, y0 := xs[0], ys[0]
		d := (ys[1]-ys[2])*(x0-xs[2]) + (xs[2]-xs[1])*(y0-ys[2])
		if d == 0 || math.IsNaN(d) {
			return
		}
		xmin, xmax := math.Min(xs[0], math.Min(xs[1], xs[2])), math.Max(xs[0], math.Max(xs[1], xs[2]))
		ymin, ymax := math.Min(ys[0], math.Min(ys[1], ys[2])), math.Max(ys[0], math.Max(ys[1], ys[2]))
		i0 := max(int(math.Ceil((xmin-out.X0)/out.Step)), 0)
		i1 := min(int(math.Floor((xmax-out.X0)/out.Step)), out.Nx-1)
		j0 := max(int(math.Ceil((ymin-out.Y0)/out.Step)), 0)
		j1 := min(int(math.Floor((ymax-out.Y0)/out.Step)), out.Ny-1)
		const eps = 1e-9
		for j := j0; j <= j1; j++ {
			for i := i0; i <= i1; i++ {
				p := j*out.Nx + i
				if done[p] {
					continue
				}
				px, py := out.At(i, j)
				w0 := ((ys[1]-ys[2])*(px-xs[2]) + (xs[2]-xs[1])*(py-ys[2])) / d
				w1 := ((ys[2]-ys[0])*(px-xs[2]) + (xs[0]-xs[2])*(py-ys[2])) / d
				w2 := 1 - w0 - w1
				if w0 < -eps || w1 < -eps || w2 < -eps {
					continue
				}
				done[p] = true
				for k, q := range qs {
					res[k][p] = w0*q[idx[0]] + w1*q[idx[1]] + w2*q[idx[2]]
				}
			}
		}
	}
	set := func(c, p, i, j int) {
		X, Y := ref.At(i, j)
		xs[c], ys[c], idx[c] = X+u[p], Y+v[p], p
	}
	for j := 0; j+1 < ref.Ny; j++ {
		for i := 0; i+1 < ref.Nx; i++ {
			p00, p10 := j*ref.Nx+i, j*ref.Nx+i+1
			p01, p11 := p00+ref.Nx, p10+ref.Nx
			if !valid(u, v, p00) || !valid(u, v, p10) || !valid(u, v, p01) || !valid(u, v, p11) {
				continue
			}
			set(0, p00, i, j)
			set(1, p10, i+1, j)
			set(2, p11, i+1, j+1)
			tri()
			set(1, p11, i+1, j+1)
			set(2, p01, i, j+1)
			tri()
		}
	}
	return res, nil
}

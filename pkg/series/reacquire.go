package series

import (
	"context"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/kinematics"
)

// progress sums the progress of the correlation passes of one frame.
type progress struct {
	f    func(done, total int)
	base int // points of the finished passes
	cur  int // total of the current pass, as last reported
}

// pass starts a correlation pass and returns its progress callback (nil
// when nobody listens).
func (p *progress) pass() func(done, total int) {
	if p.f == nil {
		return nil
	}
	p.base += p.cur
	p.cur = 0
	return func(done, total int) {
		p.cur = total
		p.f(p.base+done, p.base+total)
	}
}

// finish reports the frame complete.
func (p *progress) finish() {
	if p.f == nil {
		return
	}
	p.base += p.cur
	p.cur = 0
	p.f(p.base, p.base)
}

// minNeighbours is the number of tracked neighbours (of the eight around
// a point on the grid) a lost point needs to be re-seeded.
const minNeighbours = 2

// reacquire looks again for the points that were tracked in frame 1 but
// are lost after the incremental step to img (out, updated in place),
// starting with those next to tracked points. Each is re-seeded from its
// tracked neighbours j: its position and gradient in the previous frame
// are predicted from theirs, x̂ = mean of x_j + F_j·(X − X_j) and F̂ =
// mean F_j, and the increment from the previous image to img is
// correlated there, starting from the neighbours' increment; the mappings
// are then composed as for any incremental point. Points re-acquired in
// one pass serve as neighbours in the next, so a lost patch fills in from
// its edge. Within a pass the predictions use only the points known before
// it, so the result does not depend on the order of the points. It
// returns how many points were re-acquired.
func (t *Tracker) reacquire(ctx context.Context, img *imageio.Gray, out []PointState, prog *progress) (int, error) {
	ini := t.st.Initial
	if len(ini) != len(out) {
		return 0, nil // before frame 1 is committed, or an older state
	}
	g := t.st.Grid
	// prev holds each point's state in the previous frame: the tracked
	// one, or the prediction for a re-acquired point.
	prev := append([]PointState(nil), t.st.Points...)
	tried := make([]bool, len(out))
	total := 0
	for range g.Nx + g.Ny {
		var (
			idx   []int
			pts   [][2]float64
			start []guess
			pred  []PointState
		)
		for k := range out {
			if out[k].Valid || !ini[k] || tried[k] {
				continue
			}
			p, c, ok := t.predict(k, prev, out)
			if !ok {
				continue
			}
			if prev[k].Valid {
				// Lost in this very step: it starts from where it was,
				// with the neighbours' increment as the guess.
				p = prev[k]
			}
			// Increment guess: x̂_n − x̂_{n−1} and F̂_n·F̂_{n−1}⁻¹ − I.
			Fp := kinematics.Tensor{{p.F[0], p.F[1]}, {p.F[2], p.F[3]}}
			Fc := kinematics.Tensor{{c.F[0], c.F[1]}, {c.F[2], c.F[3]}}
			det := Fp[0][0]*Fp[1][1] - Fp[0][1]*Fp[1][0]
			if !(math.Abs(det) > 1e-9) {
				continue
			}
			inv := kinematics.Tensor{{Fp[1][1] / det, -Fp[0][1] / det}, {-Fp[1][0] / det, Fp[0][0] / det}}
			d := Fc.Mul(inv)
			tried[k] = true
			idx = append(idx, k)
			pts = append(pts, [2]float64{p.X, p.Y})
			start = append(start, guess{U: c.X - p.X, V: c.Y - p.Y, Ux: d[0][0] - 1, Uy: d[0][1], Vx: d[1][0], Vy: d[1][1] - 1, OK: true})
			pred = append(pred, p)
		}
		if len(idx) == 0 {
			break
		}
		last, err := t.previous()
		if err != nil {
			return 0, err
		}
		ms, err := t.corr.at(ctx, last, img, pts, start, prog.pass())
		if err != nil {
			return 0, err
		}
		if len(ms) != len(idx) {
			return 0, fmt.Errorf("re-acquisition: correlation returned %d points, want %d", len(ms), len(idx))
		}
		got := 0
		for n, k := range idx {
			m, q := ms[n], pred[n]
			if !m.OK || !finite(m.U, m.V, m.Ux, m.Uy, m.Vx, m.Vy) {
				continue
			}
			inc := kinematics.FromGradient(m.Ux, m.Uy, m.Vx, m.Vy)
			F := inc.Mul(kinematics.Tensor{{q.F[0], q.F[1]}, {q.F[2], q.F[3]}})
			out[k] = PointState{
				X: q.X + m.U, Y: q.Y + m.V,
				F:    [4]float64{F[0][0], F[0][1], F[1][0], F[1][1]},
				ZNCC: m.ZNCC, StdU: math.Hypot(q.StdU, m.StdU), StdV: math.Hypot(q.StdV, m.StdV),
				Valid: true,
			}
			prev[k] = q
			got++
		}
		total += got
		if got == 0 {
			break
		}
	}
	return total, nil
}

// predict returns lost point k's state in the previous frame and in the
// current one, predicted from the points around it tracked in both (prev
// and cur): an affine map x = a + A·(X − X_k) fitted by least squares to
// their positions within two grid steps gives the position a and the
// gradient A. A fit to positions, rather than extrapolating each
// neighbour's own gradient, keeps a neighbour with a biased gradient from
// throwing the prediction off. It returns false when fewer than
// minNeighbours of the eight next to k, or fewer than four in all, are
// tracked, or they lie on a line. The predicted uncertainty is the
// neighbours' mean.
func (t *Tracker) predict(k int, prev, cur []PointState) (p, c PointState, ok bool) {
	g := t.st.Grid
	i, j := k%g.Nx, k/g.Nx
	X, Y := g.pos(k)
	var (
		near, n int
		N       = mat.NewSymDense(3, nil)
		bp, bc  [2][3]float64 // right-hand sides for x and y, prev and cur
	)
	for dj := -2; dj <= 2; dj++ {
		for di := -2; di <= 2; di++ {
			ii, jj := i+di, j+dj
			if (di == 0 && dj == 0) || ii < 0 || jj < 0 || ii >= g.Nx || jj >= g.Ny {
				continue
			}
			m := jj*g.Nx + ii
			a, b := prev[m], cur[m]
			if !a.Valid || !b.Valid {
				continue
			}
			if di >= -1 && di <= 1 && dj >= -1 && dj <= 1 {
				near++
			}
			Xm, Ym := g.pos(m)
			r := [3]float64{1, (Xm - X) / g.Step, (Ym - Y) / g.Step} // scaled for conditioning
			for u := range 3 {
				for v := u; v < 3; v++ {
					N.SetSym(u, v, N.At(u, v)+r[u]*r[v])
				}
				bp[0][u] += r[u] * a.X
				bp[1][u] += r[u] * a.Y
				bc[0][u] += r[u] * b.X
				bc[1][u] += r[u] * b.Y
			}
			p.StdU += a.StdU
			p.StdV += a.StdV
			n++
		}
	}
	if near < minNeighbours || n < 4 {
		return p, c, false
	}
	var ch mat.Cholesky
	if !ch.Factorize(N) || ch.Cond() > 1e8 {
		return p, c, false // collinear
	}
	solve := func(b [3]float64) (a0, ax, ay float64, ok bool) {
		var x mat.VecDense
		if err := ch.SolveVecTo(&x, mat.NewVecDense(3, b[:])); err != nil {
			return 0, 0, 0, false
		}
		return x.AtVec(0), x.AtVec(1) / g.Step, x.AtVec(2) / g.Step, true
	}
	fit := func(q *PointState, b [2][3]float64) bool {
		x0, xx, xy, ok1 := solve(b[0])
		y0, yx, yy, ok2 := solve(b[1])
		q.X, q.Y, q.F = x0, y0, [4]float64{xx, xy, yx, yy}
		q.Valid = ok1 && ok2 && finite(x0, y0, xx, xy, yx, yy)
		return q.Valid
	}
	if !fit(&p, bp) || !fit(&c, bc) {
		return p, c, false
	}
	p.StdU, p.StdV = p.StdU/float64(n), p.StdV/float64(n)
	return p, c, true
}

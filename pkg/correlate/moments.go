package correlate

import (
	"context"
	"fmt"
	"math"
	"unsafe"
)

// The moments of the reference subsets of a grid, computed for all its
// points before the propagation. Subsets of grid points one step apart in
// y share 2m+1−step of their 2m+1 rows (23 of 31 at subset 31, step 8),
// and a row's running sums over a subset's columns (those of prepare1 and
// hessian2m, which do not depend on the subset's centre row) are the same
// for each of them: computed once per grid column and image row, they are
// combined per point with the powers of η. Along x, the segments of grid
// columns one step apart overlap the same way; for the first-order sums
// each row is cut into blocks of one step, summed once and combined per
// column (pieces). prepare1m and prepare2m then
// read the subset once, to copy and centre it. The sums of a row and the
// order of combination are fixed, so the moments do not depend on the
// number of threads or on which goroutine computes them; prepare1m and
// prepare2m differ from prepare1 and prepare2 by rounding only.

// rowSums2 holds the running sums of one row segment of 2m+1 pixels, from
// its right end as in hessian2m: Σ f, then c_k = Σ C(i+k, k) w_i for
// k ≤ 4 of w = fx², fx fy, fy² and for k ≤ 2 of fx f, fy f, fx, fy (f not
// centred).
type rowSums2 struct {
	rs         float64
	xx, xy, yy [5]float64
	bx, by     [3]float64
	jx, jy     [3]float64
}

// moments2 is the data of prepare2m for one grid point: the sums over the
// rows of c_k η^b (hessian2m's rw, k + b ≤ 4, for fx², fx fy, fy², packed
// by pack4; and rbw, k + b ≤ 2, for fx f, fy f, fx, fy, f not centred,
// packed by pack2) and Σ f.
type moments2 struct {
	rw  [3][15]float64
	rbw [4][6]float64
	sum float64
	ok  bool // computed (the point's subset was to be computed)
}

// pack4 and pack2 list the (k, b) of the packed entries, k + b ≤ 4 or 2.
var (
	pack4 = [15][2]int{{0, 0}, {0, 1}, {0, 2}, {0, 3}, {0, 4}, {1, 0}, {1, 1}, {1, 2}, {1, 3}, {2, 0}, {2, 1}, {2, 2}, {3, 0}, {3, 1}, {4, 0}}
	pack2 = [6][2]int{{0, 0}, {0, 1}, {0, 2}, {1, 0}, {1, 1}, {2, 0}}
)

// momentTable holds moments1 (first order) or moments2 (second order) for
// every point of a grid.
type momentTable struct {
	g  Grid
	p1 []moments1
	p2 []moments2
}

// index returns the index of the grid point at pixel (ix, iy), or −1.
func (t *momentTable) index(ix, iy int) int {
	g := &t.g
	dx, dy := ix-g.X0, iy-g.Y0
	if dx < 0 || dy < 0 || dx%g.Step != 0 || dy%g.Step != 0 {
		return -1
	}
	i, j := dx/g.Step, dy/g.Step
	if i >= g.Nx || j >= g.Ny {
		return -1
	}
	return j*g.Nx + i
}

// at1 returns the first-order moments of the grid point at pixel (ix, iy),
// or nil.
func (t *momentTable) at1(ix, iy int) *moments1 {
	if k := t.index(ix, iy); k >= 0 && t.p1 != nil && t.p1[k].ok {
		return &t.p1[k]
	}
	return nil
}

// at returns the second-order moments of the grid point at pixel (ix,
// iy), or nil.
func (t *momentTable) at(ix, iy int) *moments2 {
	if k := t.index(ix, iy); k >= 0 && t.p2 != nil && t.p2[k].ok {
		return &t.p2[k]
	}
	return nil
}

// momentBytes bounds the moment table's size per image pixel.
const momentBytes = 16

// gridMoments computes the moment table of the grid's pending points and
// gives it to the solvers, where it serves: the portable prepares (the
// vector ones are faster without it), subsets that overlap (step < 2m+1)
// and a table of at most momentBytes per image pixel.
func (r *run) gridMoments(ctx context.Context) error {
	g := r.grid
	side := 2*r.m + 1
	s0 := r.solvers[0]
	size := unsafe.Sizeof(moments1{})
	if r.opt.Shape == Second {
		size = unsafe.Sizeof(moments2{})
	}
	if g.Step >= side || (vectorPass && !r.tun.portable && side >= 8) || size > uintptr(momentBytes*g.Step*g.Step) {
		return nil
	}
	t := &momentTable{g: g}
	if r.opt.Shape == Second {
		t.p2 = make([]moments2, g.Len())
	} else {
		t.p1 = make([]moments1, g.Len())
	}
	// Bands of grid rows on the pool, each walking down its image rows:
	// a row's sums for every grid column that needs them, kept for the
	// last 2m+1 rows, and a grid row's points combined when its last
	// image row is done. Rows shared by two bands are summed in both, the
	// same way; a point's moments depend on its own rows only, so the
	// split does not change them.
	parts := min(g.Ny, 2*r.threads)
	band := (g.Ny + parts - 1) / parts
	r.shareOut((g.Ny+band-1)/band, func(part int) {
		j0, j1 := part*band, min((part+1)*band, g.Ny)
		need := make([]bool, g.Nx)
		for j := j0; j < j1; j++ {
			for i := range need {
				need[i] = need[i] || r.state[g.Index(i, j)] == stPending
			}
		}
		var ring1 []rowSums1
		var ring2 []rowSums2
		var pc1 pieces[rowSums1, *rowSums1]
		var pc2 pieces[rowSums2, *rowSums2]
		if t.p2 != nil {
			ring2 = make([]rowSums2, side*g.Nx)
			pc2.init(need, side, g.Step)
		} else {
			ring1 = make([]rowSums1, side*g.Nx)
			pc1.init(need, side, g.Step)
		}
		y0, y1 := g.Y0+j0*g.Step-r.m, g.Y0+(j1-1)*g.Step+r.m
		for y := y0; y <= y1; y++ {
			if (y-y0)%64 == 0 && ctx.Err() != nil {
				return
			}
			slot := (y - y0) % side * g.Nx
			if ring1 != nil {
				pc1.sums(s0, ring1[slot:slot+g.Nx], need, g.X0-r.m, y)
			} else {
				pc2.sums(s0, ring2[slot:slot+g.Nx], need, g.X0-r.m, y)
			}
			d := y - r.m - g.Y0
			if d%g.Step != 0 || d/g.Step < j0 {
				continue
			}
			j := d / g.Step
			for i := range need {
				k := g.Index(i, j)
				switch {
				case r.state[k] != stPending:
				case ring2 != nil:
					s0.moments2(&t.p2[k], y-r.m, ring2, g.Nx, i, y0)
				default:
					s0.moments1(&t.p1[k], y-r.m, ring1, g.Nx, i, y0)
				}
			}
		}
	})
	if err := ctx.Err(); err != nil {
		return fmt.Errorf("correlate: %w", err)
	}
	for _, s := range r.solvers {
		s.mom = t
	}
	return nil
}

// moments2 sets p to the moments of the subset centred on row iy of grid
// column i, from the row sums in ring (row y of the column at
// ring[((y−y0) mod (2m+1))·nx + i]). It reads only the solver's reference
// data, so several goroutines may call it.
func (s *solver) moments2(p *moments2, iy int, ring []rowSums2, nx, i, y0 int) {
	m := s.m
	side := 2*m + 1
	var rw [3][5][5]float64
	var rbw [4][3][3]float64
	var sum float64
	for j := -m; j <= m; j++ {
		q := &ring[(iy+j-y0)%side*nx+i]
		p1 := float64(j)
		p2 := p1 * p1
		p3 := p2 * p1
		p4 := p3 * p1
		sum += q.rs
		accRow2(&rw, &rbw, q, p1, p2, p3, p4)
		acc2(&rbw[0], q.bx[0], q.bx[1], q.bx[2], p1, p2)
		acc2(&rbw[1], q.by[0], q.by[1], q.by[2], p1, p2)
	}
	*p = moments2{sum: sum, ok: true}
	for w := range rw {
		for e, kb := range pack4 {
			p.rw[w][e] = rw[w][kb[0]][kb[1]]
		}
	}
	for w := range rbw {
		for e, kb := range pack2 {
			p.rbw[w][e] = rbw[w][kb[0]][kb[1]]
		}
	}
}

// set sets q to the running sums of the pixels pix with gradients gxs and
// gys (of equal length); row is scratch of three times their length.
func (q *rowSums2) set(pix, gxs, gys []float32, row []float64) {
	n := len(pix)
	f, fx, fy := row[:n], row[n:2*n], row[2*n:3*n]
	copyRow2(q, pix, gxs, gys, f, fx, fy)
	fx, fy = fx[:len(f)], fy[:len(f)]
	var d0, d1, d2, e0, e1, e2 float64
	for i := len(f) - 1; i >= 0; i-- {
		v := f[i]
		d0 += fx[i] * v
		d1 += d0
		d2 += d1
		e0 += fy[i] * v
		e1 += e0
		e2 += e1
	}
	q.bx, q.by = [3]float64{d0, d1, d2}, [3]float64{e0, e1, e2}
}

// binomials returns C(a+k−1, k) for k = 0 … 4: for a = j+1 the weights
// C(j+k, k) of the pixel at index j in the running sums c_k, and for a = o
// the coefficients of a shift by o, c_k ← Σ_i C(o+i−1, i)·c_(k−i)
// (Vandermonde's identity).
func binomials(a float64) [5]float64 {
	b1 := a
	b2 := b1 * (a + 1) / 2
	b3 := b2 * (a + 2) / 3
	b4 := b3 * (a + 3) / 4
	return [5]float64{1, b1, b2, b3, b4}
}

// addPixel adds to q the pixel of value v and gradient (gx, gy) at index j
// from the left end (weight C(j+k, k) in c_k).
func (q *rowSums2) addPixel(v, gx, gy float64, w *[5]float64) {
	xx, xy, yy := gx*gx, gx*gy, gy*gy
	q.rs += v
	for k := range 5 {
		q.xx[k] += w[k] * xx
		q.xy[k] += w[k] * xy
		q.yy[k] += w[k] * yy
	}
	bx, by := gx*v, gy*v
	for k := range 3 {
		q.bx[k] += w[k] * bx
		q.by[k] += w[k] * by
		q.jx[k] += w[k] * gx
		q.jy[k] += w[k] * gy
	}
}

// addShifted adds to q the sums p of pixels o places further from the left
// end than their own (see binomials).
func (q *rowSums2) addShifted(p *rowSums2, b *[5]float64) {
	q.rs += p.rs
	shift5 := func(d, c *[5]float64) {
		d[0] += c[0]
		d[1] += c[1] + b[1]*c[0]
		d[2] += c[2] + b[1]*c[1] + b[2]*c[0]
		d[3] += c[3] + b[1]*c[2] + b[2]*c[1] + b[3]*c[0]
		d[4] += c[4] + b[1]*c[3] + b[2]*c[2] + b[3]*c[1] + b[4]*c[0]
	}
	shift3 := func(d, c *[3]float64) {
		d[0] += c[0]
		d[1] += c[1] + b[1]*c[0]
		d[2] += c[2] + b[1]*c[1] + b[2]*c[0]
	}
	shift5(&q.xx, &p.xx)
	shift5(&q.xy, &p.xy)
	shift5(&q.yy, &p.yy)
	shift3(&q.bx, &p.bx)
	shift3(&q.by, &p.by)
	shift3(&q.jx, &p.jx)
	shift3(&q.jy, &p.jy)
}

// copyRow2 copies one subset row's samples and gradients (pix, gxs, gys,
// of equal length) into f, fx and fy, and sets q's sums that do not need
// f̄: rs, xx, xy, yy, jx and jy (see rowSums2). prepare2 and rowSums2
// share it; its loops keep their sums in registers.
func copyRow2(q *rowSums2, pix, gxs, gys []float32, f, fx, fy []float64) {
	gxs, gys = gxs[:len(pix)], gys[:len(pix)]
	f, fx, fy = f[:len(pix)], fx[:len(pix)], fy[:len(pix)]
	var rs, a0, a1, a2, a3, a4, b0, b1, b2, b3, b4 float64
	for i := len(pix) - 1; i >= 0; i-- {
		v, gx, gy := float64(pix[i]), float64(gxs[i]), float64(gys[i])
		f[i], fx[i], fy[i] = v, gx, gy
		rs += v
		a0 += gx * gx
		a1 += a0
		a2 += a1
		a3 += a2
		a4 += a3
		b0 += gx * gy
		b1 += b0
		b2 += b1
		b3 += b2
		b4 += b3
	}
	var c0, c1, c2, c3, c4, g0, g1, g2, h0, h1, h2 float64
	for i := len(f) - 1; i >= 0; i-- {
		gx, gy := fx[i], fy[i]
		c0 += gy * gy
		c1 += c0
		c2 += c1
		c3 += c2
		c4 += c3
		g0 += gx
		g1 += g0
		g2 += g1
		h0 += gy
		h1 += h0
		h2 += h1
	}
	q.rs = rs
	q.xx, q.xy, q.yy = [5]float64{a0, a1, a2, a3, a4}, [5]float64{b0, b1, b2, b3, b4}, [5]float64{c0, c1, c2, c3, c4}
	q.jx, q.jy = [3]float64{g0, g1, g2}, [3]float64{h0, h1, h2}
}

// accRow2 adds one row's sums q that do not need f̄ (xx, xy, yy into rw;
// jx, jy into rbw[2], rbw[3]) with the powers p1 … p4 of its η, as
// hessian2m does; moments2 and prepare2 share it.
func accRow2(rw *[3][5][5]float64, rbw *[4][3][3]float64, q *rowSums2, p1, p2, p3, p4 float64) {
	for w, c := range [3]*[5]float64{&q.xx, &q.xy, &q.yy} {
		accPow(&rw[w][0], c[0], p1, p2, p3, p4)
		accPow(&rw[w][1], c[1], p1, p2, p3, p4)
		acc4hi(&rw[w], c[2], c[3], c[4], p1, p2)
	}
	acc2(&rbw[2], q.jx[0], q.jx[1], q.jx[2], p1, p2)
	acc2(&rbw[3], q.jy[0], q.jy[1], q.jy[2], p1, p2)
}

// prepare2m is prepare2 from the moments p of the grid point (ix, iy): it
// reads the subset once, to copy and centre the samples and take
// ‖f − f̄‖; Σ J f̃ = Σ J f − f̄ Σ J (in the rising basis, the change of
// basis being linear).
func (s *solver) prepare2m(ix, iy int, p *moments2) Status {
	fm := p.sum / float64(s.n)
	if !s.copyCentred(ix, iy, fm) {
		return LowContrast
	}
	var rw [3][5][5]float64
	var rbw [4][3][3]float64
	for w := range rw {
		for e, kb := range pack4 {
			rw[w][kb[0]][kb[1]] = p.rw[w][e]
		}
	}
	for e, kb := range pack2 {
		jx, jy := p.rbw[2][e], p.rbw[3][e]
		rbw[0][kb[0]][kb[1]] = p.rbw[0][e] - fm*jx
		rbw[1][kb[0]][kb[1]] = p.rbw[1][e] - fm*jy
		rbw[2][kb[0]][kb[1]] = jx
		rbw[3][kb[0]][kb[1]] = jy
	}
	var h [144]float64
	s.risingToMoments(&h, &rw, &rbw)
	return s.factor(&h)
}

// copyCentred copies the subset centred on the pixel (ix, iy) into s.f (less
// its mean fm), s.fx and s.fy, and sets s.fmean and s.df = ‖f − f̄‖. It
// reports false for a subset of too little contrast.
func (s *solver) copyCentred(ix, iy int, fm float64) bool {
	m := s.m
	side := 2*m + 1
	stride, w := s.ref.Stride, s.ref.W
	s.fmean = fm
	// Two partial sums of squares, so that the additions do not wait for
	// each other.
	var ss0, ss1 float64
	k := 0
	for j := -m; j <= m; j++ {
		f, fx, fy := s.f[k:k+side], s.fx[k:k+side], s.fy[k:k+side]
		o := (iy+j)*stride + ix - m
		pix := s.ref.Pix[o : o+side]
		o = (iy+j)*w + ix - m
		gxs, gys := s.gx[o:o+side], s.gy[o:o+side]
		pix, gxs, gys = pix[:len(f)], gxs[:len(f)], gys[:len(f)]
		fx, fy = fx[:len(f)], fy[:len(f)]
		i := 0
		for ; i+1 < len(f); i += 2 {
			a, b := float64(pix[i])-fm, float64(pix[i+1])-fm
			f[i], fx[i], fy[i] = a, float64(gxs[i]), float64(gys[i])
			f[i+1], fx[i+1], fy[i+1] = b, float64(gxs[i+1]), float64(gys[i+1])
			ss0 += a * a
			ss1 += b * b
		}
		if i < len(f) {
			a := float64(pix[i]) - fm
			f[i], fx[i], fy[i] = a, float64(gxs[i]), float64(gys[i])
			ss0 += a * a
		}
		k += side
	}
	s.df = math.Sqrt(ss0 + ss1)
	return s.df > 0 && s.df/math.Sqrt(float64(s.n)) >= s.minStd
}

// rowSums1 holds the running sums of one row segment of 2m+1 pixels taken
// from its right end, as in prepare1: Σ f, and c0 = Σ w, c1 = Σ (i+1) w
// (and c2 = Σ (i+1)(i+2)/2 w for the Hessian's weights) of w = fx², fx fy,
// fy² and of fx f, fy f, fx, fy (f not centred).
type rowSums1 struct {
	rs, xx0, xx1, xx2, xy0, xy1, xy2, yy0, yy1, yy2 float64
	bx0, bx1, by0, by1, jx0, jx1, jy0, jy1          float64
}

// moments1 is the data of prepare1m for one grid point: rxx, rxy, ryy as in
// prepare1 (sums over the rows of c_k η^b, fromRising2's input), the
// moments Σ w ξ^a η^b (a + b ≤ 1) of fx f, fy f, fx and fy (f not
// centred), and Σ f.
type moments1 struct {
	rxx, rxy, ryy  [3][3]float64
	bx, by, jx, jy [2][2]float64
	sum            float64
	ok             bool // computed (the point's subset was to be computed)
}

// moments1 sets p to the first-order moments of the subset centred on row
// iy of grid column i, from the row sums in ring (as in moments2).
func (s *solver) moments1(p *moments1, iy int, ring []rowSums1, nx, i, y0 int) {
	m := s.m
	side := 2*m + 1
	cc := float64(m + 1)
	*p = moments1{ok: true}
	for j := -m; j <= m; j++ {
		q := &ring[(iy+j-y0)%side*nx+i]
		eta := float64(j)
		p.sum += q.rs
		acc2(&p.rxx, q.xx0, q.xx1, q.xx2, eta, eta*eta)
		acc2(&p.rxy, q.xy0, q.xy1, q.xy2, eta, eta*eta)
		acc2(&p.ryy, q.yy0, q.yy1, q.yy2, eta, eta*eta)
		addRow1(&p.bx, cc, eta, q.bx0, q.bx1)
		addRow1(&p.by, cc, eta, q.by0, q.by1)
		addRow1(&p.jx, cc, eta, q.jx0, q.jx1)
		addRow1(&p.jy, cc, eta, q.jy0, q.jy1)
	}
}

// rowSummer is the row-sum type of one warp order (*rowSums1, *rowSums2)
// with what pieces needs of it.
type rowSummer[T any] interface {
	*T
	// set sets the sums of the pixels pix with gradients gxs and gys (of
	// equal length; row is scratch of three times their length).
	set(pix, gxs, gys []float32, row []float64)
	// addPixel adds the pixel of value v and gradient (gx, gy) at index
	// j from the left end, given w = binomials(j+1).
	addPixel(v, gx, gy float64, w *[5]float64)
	// addShifted adds the sums p of pixels o places further from the left
	// end than their own, given b = binomials(o).
	addShifted(p *T, b *[5]float64)
}

// pieces is the scratch of sums for one row of a grid: the segment of
// grid column i, the 2m+1 pixels from x0 + i·step on, is made of
// q = (2m+1)/step blocks of step pixels, those that start where the
// segments of columns i … i+q−1 start, and the first rem = (2m+1) mod step
// pixels (the head) of the block where the segment of column i+q starts.
// The sums of each block and head are taken once per row and combined per
// column: every pixel of the row is read once instead of about
// (2m+1)/step times.
type pieces[T any, P rowSummer[T]] struct {
	q, rem, step int
	head, block  []T    // sums of the first rem pixels, and of all step pixels, of block b
	needHead     []bool // head or block b is needed
	needBlock    []bool // block b is needed
	row          []float64
	wts          [][5]float64 // binomials(j+1) of the pixels j = rem … step−1 of a block
	shift        [][5]float64 // binomials(k·step), k = 1 … q
}

// init sizes p for a row of grid columns of which need are computed, with
// segments of side pixels that start step pixels apart.
func (p *pieces[T, P]) init(need []bool, side, step int) {
	p.q, p.rem, p.step = side/step, side%step, step
	nb := len(need) + p.q
	p.head, p.block = make([]T, nb), make([]T, nb)
	p.needHead, p.needBlock = make([]bool, nb), make([]bool, nb)
	p.row = make([]float64, 3*step)
	for j := p.rem; j < step; j++ {
		p.wts = append(p.wts, binomials(float64(j+1)))
	}
	p.shift = make([][5]float64, p.q+1)
	for k := range p.shift {
		p.shift[k] = binomials(float64(k * step))
	}
	for i, ok := range need {
		if !ok {
			continue
		}
		p.needHead[i+p.q] = true
		for k := 0; k < p.q; k++ {
			p.needHead[i+k], p.needBlock[i+k] = true, true
		}
	}
}

// sums sets out[i] to the running sums of the segment of image row y of
// every grid column i with need[i], the columns' segments starting at
// x0 + i·step, from the blocks and heads. They are those of the whole
// segment to rounding; each is formed in the same order whichever columns
// are needed.
func (p *pieces[T, P]) sums(s *solver, out []T, need []bool, x0, y int) {
	q, rem, st := p.q, p.rem, p.step
	w := s.ref.W
	pix := s.ref.Pix[y*s.ref.Stride : y*s.ref.Stride+w]
	gxs, gys := s.gx[y*w:(y+1)*w], s.gy[y*w:(y+1)*w]
	for b, ok := range p.needHead {
		if !ok {
			continue
		}
		x := x0 + b*st
		P(&p.head[b]).set(pix[x:x+rem], gxs[x:x+rem], gys[x:x+rem], p.row)
		if p.needBlock[b] {
			// The rest of the block, each pixel with the weights of its
			// place from the block's left end.
			bl := &p.block[b]
			*bl = p.head[b]
			for j := rem; j < st; j++ {
				P(bl).addPixel(float64(pix[x+j]), float64(gxs[x+j]), float64(gys[x+j]), &p.wts[j-rem])
			}
		}
	}
	out, need = out[:len(need)], need[:len(need)]
	for i, ok := range need {
		if !ok {
			continue
		}
		o := P(&out[i])
		var zero T
		out[i] = zero
		o.addShifted(&p.head[i+q], &p.shift[q])
		for k := q - 1; k >= 1; k-- {
			o.addShifted(&p.block[i+k], &p.shift[k])
		}
		o.addShifted(&p.block[i], &p.shift[0])
	}
}

// addPixel adds to q the pixel of value v and gradient (gx, gy) at index j
// from the left end: weight a = j+1 in c₁ and a(a+1)/2 in c₂ (see rowSums1),
// w[1] and w[2] of w = binomials(j+1).
func (q *rowSums1) addPixel(v, gx, gy float64, w *[5]float64) {
	a, a2 := w[1], w[2]
	xx, xy, yy := gx*gx, gx*gy, gy*gy
	q.rs += v
	q.xx0, q.xx1, q.xx2 = q.xx0+xx, q.xx1+a*xx, q.xx2+a2*xx
	q.xy0, q.xy1, q.xy2 = q.xy0+xy, q.xy1+a*xy, q.xy2+a2*xy
	q.yy0, q.yy1, q.yy2 = q.yy0+yy, q.yy1+a*yy, q.yy2+a2*yy
	bx, by := gx*v, gy*v
	q.bx0, q.bx1 = q.bx0+bx, q.bx1+a*bx
	q.by0, q.by1 = q.by0+by, q.by1+a*by
	q.jx0, q.jx1 = q.jx0+gx, q.jx1+a*gx
	q.jy0, q.jy1 = q.jy0+gy, q.jy1+a*gy
}

// addShifted adds to q the sums p of pixels o places further from the
// segment's left end than their own: with i ↦ i + o (i counted from the
// left, the loops of rowSums1 running from the right end), c₁ = Σ (i+1) w
// gains o·c₀ and c₂ = Σ (i+1)(i+2)/2 w gains o·c₁ + o(o+1)/2·c₀, with
// b = binomials(o) = [1, o, o(o+1)/2, …].
func (q *rowSums1) addShifted(p *rowSums1, b *[5]float64) {
	o, h := b[1], b[2]
	q.rs += p.rs
	q.xx0, q.xx1, q.xx2 = q.xx0+p.xx0, q.xx1+(p.xx1+o*p.xx0), q.xx2+(p.xx2+o*p.xx1+h*p.xx0)
	q.xy0, q.xy1, q.xy2 = q.xy0+p.xy0, q.xy1+(p.xy1+o*p.xy0), q.xy2+(p.xy2+o*p.xy1+h*p.xy0)
	q.yy0, q.yy1, q.yy2 = q.yy0+p.yy0, q.yy1+(p.yy1+o*p.yy0), q.yy2+(p.yy2+o*p.yy1+h*p.yy0)
	q.bx0, q.bx1 = q.bx0+p.bx0, q.bx1+(p.bx1+o*p.bx0)
	q.by0, q.by1 = q.by0+p.by0, q.by1+(p.by1+o*p.by0)
	q.jx0, q.jx1 = q.jx0+p.jx0, q.jx1+(p.jx1+o*p.jx0)
	q.jy0, q.jy1 = q.jy0+p.jy0, q.jy1+(p.jy1+o*p.jy0)
}

// set sets q to the running sums of the pixels pix with gradients gxs
// and gys (of equal length).
func (q *rowSums1) set(pix, gxs, gys []float32, _ []float64) {
	gxs, gys = gxs[:len(pix)], gys[:len(pix)]
	var rs, xx0, xx1, xx2, xy0, xy1, xy2, yy0, yy1, yy2 float64
	for i := len(pix) - 1; i >= 0; i-- {
		v, gx, gy := float64(pix[i]), float64(gxs[i]), float64(gys[i])
		rs += v
		xx0 += gx * gx
		xx1 += xx0
		xx2 += xx1
		xy0 += gx * gy
		xy1 += xy0
		xy2 += xy1
		yy0 += gy * gy
		yy1 += yy0
		yy2 += yy1
	}
	var bx0, bx1, by0, by1, jx0, jx1, jy0, jy1 float64
	for i := len(pix) - 1; i >= 0; i-- {
		v, gx, gy := float64(pix[i]), float64(gxs[i]), float64(gys[i])
		bx0 += gx * v
		bx1 += bx0
		by0 += gy * v
		by1 += by0
		jx0 += gx
		jx1 += jx0
		jy0 += gy
		jy1 += jy0
	}
	*q = rowSums1{rs, xx0, xx1, xx2, xy0, xy1, xy2, yy0, yy1, yy2, bx0, bx1, by0, by1, jx0, jx1, jy0, jy1}
}

// prepare1m is prepare1 from the moments p of the grid point (ix, iy): it
// reads the subset once, to copy and centre the samples and take
// ‖f − f̄‖; Σ J f̃ = Σ J f − f̄ Σ J.
func (s *solver) prepare1m(ix, iy int, p *moments1) Status {
	fm := p.sum / float64(s.n)
	if !s.copyCentred(ix, iy, fm) {
		return LowContrast
	}
	cc := float64(s.m + 1)
	hxx, hxy, hyy := fromRising2(&p.rxx, cc), fromRising2(&p.rxy, cc), fromRising2(&p.ryy, cc)
	var h [144]float64
	s.setHessian1(&h, &hxx, &hxy, &hyy)
	for a, pw := range pow1 {
		bb, jj := &p.bx, &p.jx
		if a >= 3 {
			bb, jj = &p.by, &p.jy
		}
		sj := jj[pw[0]][pw[1]]
		s.sj[a] = sj
		s.b0[a] = bb[pw[0]][pw[1]] - fm*sj
	}
	for a := 6; a < 12; a++ {
		s.b0[a], s.sj[a] = 0, 0
	}
	return s.factor(&h)
}

package correlate

import (
	"fmt"
	"math"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
)

// setupGrid lays the grid over the mask's bounding box and marks the
// points whose subset is wholly inside the mask.
func (r *run) setupGrid() error {
	if err := r.layout(); err != nil {
		return err
	}
	parallelFor(r.grid.Ny, r.threads, r.markRows)
	r.label()
	return nil
}

// layout lays the grid over the mask's bounding box and allocates the
// per-point state.
func (r *run) layout() error {
	m, step := r.m, r.opt.Step
	bx0, by0, bx1, by1 := r.bounds()
	// Keep subsets the interpolation edge margin inside the image, so that
	// a point near the border is not rejected for any small motion.
	e := int(edgeMargin(r.opt.Interp))
	bx0, by0 = max(bx0, e), max(by0, e)
	bx1, by1 = min(bx1, r.ref.W-e), min(by1, r.ref.H-e)
	g := Grid{X0: bx0 + m, Y0: by0 + m, Step: step}
	if bx1-1-m < g.X0 || by1-1-m < g.Y0 {
		return fmt.Errorf("correlate: the region of interest (%d×%d px bounding box) is smaller than the %d px subset", bx1-bx0, by1-by0, r.opt.Subset)
	}
	g.Nx = (bx1-1-m-g.X0)/step + 1
	g.Ny = (by1-1-m-g.Y0)/step + 1
	r.grid = g
	n := g.Len()
	if r.opt.Start != nil && len(r.opt.Start) != n {
		return fmt.Errorf("correlate: Start has %d points but the grid has %d (%d×%d): it must come from a run with the same images size, subset, step and ROI", len(r.opt.Start), n, g.Nx, g.Ny)
	}
	r.alloc(n)
	return nil
}

// markRows marks the points of grid rows j0 ≤ j < j1 whose subset is
// wholly inside the mask as pending, those of too little contrast as
// failed. Each grid point depends on its own subset only, so rows can be
// marked in any order by any goroutine.
func (r *run) markRows(j0, j1 int) {
	g, m := r.grid, r.m
	var sl *slider
	if r.refInt {
		sl = newSlider(r.ref, g, m)
	}
	for j := j0; j < j1; j++ {
		if sl != nil {
			_, y := g.At(0, j)
			sl.moveTo(y)
		}
		for i := 0; i < g.Nx; i++ {
			x, y := g.At(i, j)
			k := g.Index(i, j)
			r.pts[k].X, r.pts[k].Y = float64(x), float64(y)
			if !r.rectInside(x-m, y-m, x+m, y+m) {
				r.pts[k].Status = Outside
				continue
			}
			var std float64
			if sl != nil {
				std = sl.std(i * g.Step)
			} else {
				std = subsetStd(r.ref, x, y, m)
			}
			if std < r.minStd {
				// Low contrast is a property of the reference subset
				// alone: flag it now, so that blank areas are reported
				// as such rather than as unreached.
				r.pts[k].Status = LowContrast
				r.state[k] = stFailed
			} else {
				r.state[k] = stPending
			}
		}
	}
}

// slider keeps, for the subsets of one grid row, the sums of the grey
// levels and of their squares down every column of the subsets' rows, and
// moves them down the image by adding and subtracting rows. For an image
// of integer grey levels of at most 2¹⁶ in magnitude (checked by
// maskSums) every such sum, and every subset's sum of them, is an integer
// below 2⁵³ and so exact in float64 in any order: the standard deviations
// are bitwise those of subsetStd, at about 1/(2m+1) of the cost.
type slider struct {
	g     *imageio.Gray
	x0, m int // first column (of the first subset), half-width
	y     int // centre row of the sums, −1: none yet
	s, ss []float64
	n     float64 // pixels per subset
}

func newSlider(g *imageio.Gray, grid Grid, m int) *slider {
	w := (grid.Nx-1)*grid.Step + 2*m + 1
	return &slider{g: g, x0: grid.X0 - m, m: m, y: -1, s: make([]float64, w), ss: make([]float64, w), n: float64((2*m + 1) * (2*m + 1))}
}

// add adds sign times row y to the column sums.
func (sl *slider) add(y int, sign float64) {
	row := sl.g.Pix[y*sl.g.Stride+sl.x0 : y*sl.g.Stride+sl.x0+len(sl.s)]
	s, ss := sl.s[:len(row)], sl.ss[:len(row)]
	for x, v := range row {
		f := float64(v)
		s[x] += sign * f
		ss[x] += sign * (f * f)
	}
}

// moveTo makes the sums those of rows y−m … y+m.
func (sl *slider) moveTo(y int) {
	m := sl.m
	if sl.y < 0 || y < sl.y || y-sl.y > 2*m {
		clear(sl.s)
		clear(sl.ss)
		for yy := y - m; yy <= y+m; yy++ {
			sl.add(yy, 1)
		}
	} else {
		for yy := sl.y - m; yy < y-m; yy++ {
			sl.add(yy, -1)
		}
		for yy := sl.y + m + 1; yy <= y+m; yy++ {
			sl.add(yy, 1)
		}
	}
	sl.y = y
}

// std returns the standard deviation of the subset whose columns start at
// offset c of the sums, as subsetStd computes it from the same sums.
func (sl *slider) std(c int) float64 {
	var s, ss float64
	for k := c; k <= c+2*sl.m; k++ {
		s += sl.s[k]
		ss += sl.ss[k]
	}
	return stdOf(s, ss, sl.n)
}

// label splits the computable points into 4-connected components.
func (r *run) label() {
	r.comp = make([]int32, len(r.pts))
	for k := range r.comp {
		r.comp[k] = -1
	}
	var stack []int32
	var nb [4]int32
	for k := range r.pts {
		if r.state[k] != stPending || r.comp[k] >= 0 {
			continue
		}
		c := int32(len(r.compN))
		size := 0
		r.comp[k] = c
		stack = append(stack[:0], int32(k))
		for len(stack) > 0 {
			x := stack[len(stack)-1]
			stack = stack[:len(stack)-1]
			size++
			for _, y := range nb[:r.neighbours(int(x), &nb)] {
				if r.state[y] == stPending && r.comp[y] < 0 {
					r.comp[y] = c
					stack = append(stack, y)
				}
			}
		}
		r.compN = append(r.compN, size)
	}
}

// untouchedComponent returns the largest component (lowest label on ties)
// of at least 10 points with no computed point and not yet tried, or −1.
func (r *run) untouchedComponent(tried map[int]bool) int {
	touched := make([]bool, len(r.compN))
	for k, c := range r.comp {
		if c >= 0 && r.state[k] != stPending {
			touched[c] = true
		}
	}
	best := -1
	for c, n := range r.compN {
		if !touched[c] && !tried[c] && n >= 10 && (best < 0 || n > r.compN[best]) {
			best = c
		}
	}
	return best
}

func (r *run) alloc(n int) {
	r.pts = make([]Point, n)
	r.state = make([]uint8, n)
	r.hUU = make([]float64, n)
	r.hVV = make([]float64, n)
	r.s2 = make([]float64, n)
}

// bounds returns the bounding box of the mask, x0 ≤ x < x1, y0 ≤ y < y1:
// the whole image without one.
func (r *run) bounds() (x0, y0, x1, y1 int) {
	if r.mask == nil {
		return 0, 0, r.ref.W, r.ref.H
	}
	return r.mask.Bounds()
}

// rectInside reports whether every pixel x0 ≤ x ≤ x1, y0 ≤ y ≤ y1 is
// inside the mask (roi.Mask.RectInside), or inside the image without one.
func (r *run) rectInside(x0, y0, x1, y1 int) bool {
	if r.mask == nil {
		return x0 >= 0 && y0 >= 0 && x1 < r.ref.W && y1 < r.ref.H && x0 <= x1 && y0 <= y1
	}
	return r.mask.RectInside(x0, y0, x1, y1)
}

// maskSums sets rows[y] to the count, sum and sum of squares of the grey
// levels of row y of g inside the mask m (nil: all of them), and ints[y]
// to whether all grey levels of the row are integers of at most 2¹⁶ in
// magnitude (see slider), for y0 ≤ y < y1.
func maskSums(g *imageio.Gray, m *roi.Mask, rows [][3]float64, ints []bool, y0, y1 int) {
	for y := y0; y < y1; y++ {
		var n, s, ss float64
		// frac collects the bits of every sample's fraction (NaN and
		// out-of-range samples have one), top the largest |sample|.
		var frac, top uint32
		pix := g.Pix[y*g.Stride : y*g.Stride+g.W]
		for _, v := range pix {
			frac |= math.Float32bits(v-float32(int32(v))) & 0x7fffffff
			top = max(top, math.Float32bits(v)&0x7fffffff)
		}
		if m == nil {
			for _, v := range pix {
				f := float64(v)
				s += f
				ss += f * f
			}
			n = float64(len(pix))
		} else {
			in := m.Row(y)
			in = in[:len(pix)]
			for x, v := range pix {
				if in[x] {
					f := float64(v)
					n++
					s += f
					ss += f * f
				}
			}
		}
		rows[y] = [3]float64{n, s, ss}
		ints[y] = frac == 0 && top <= math.Float32bits(1<<16)
	}
}

// stdOfSums is the standard deviation from the row sums of maskSums,
// added over the rows in order.
func stdOfSums(rows [][3]float64) float64 {
	var n, s, ss float64
	for _, r := range rows {
		n += r[0]
		s += r[1]
		ss += r[2]
	}
	if n < 2 {
		return 0
	}
	mean := s / n
	return math.Sqrt(math.Max(ss/n-mean*mean, 0))
}

// subsetStd returns the grey-level standard deviation of the subset of
// half-width m centred at pixel (x, y), which must lie inside g.
func subsetStd(g *imageio.Gray, x, y, m int) float64 {
	var s, ss float64
	for j := y - m; j <= y+m; j++ {
		for _, v := range g.Pix[j*g.Stride+x-m : j*g.Stride+x+m+1] {
			f := float64(v)
			s += f
			ss += f * f
		}
	}
	return stdOf(s, ss, float64((2*m+1)*(2*m+1)))
}

// stdOf is the standard deviation of n values from their sum and sum of
// squares.
func stdOf(s, ss, n float64) float64 {
	mean := s / n
	return math.Sqrt(math.Max(ss/n-mean*mean, 0))
}

package calib

import (
	"math"
	"sort"
)

// buckets is a uniform spatial hash of candidate positions.
type buckets struct {
	cell   float64
	x0, y0 float64
	nx, ny int
	start  []int
	items  []int
	pts    []candidate
}

func newBuckets(pts []candidate, cell float64) *buckets {
	b := &buckets{cell: cell, pts: pts}
	if len(pts) == 0 {
		return b
	}
	x0, y0, x1, y1 := math.Inf(1), math.Inf(1), math.Inf(-1), math.Inf(-1)
	for _, p := range pts {
		x0, y0 = math.Min(x0, p.x), math.Min(y0, p.y)
		x1, y1 = math.Max(x1, p.x), math.Max(y1, p.y)
	}
	b.x0, b.y0 = x0, y0
	b.nx = int((x1-x0)/cell) + 1
	b.ny = int((y1-y0)/cell) + 1
	count := make([]int, b.nx*b.ny+1)
	key := func(p candidate) int { return int((p.y-y0)/cell)*b.nx + int((p.x-x0)/cell) }
	for _, p := range pts {
		count[key(p)+1]++
	}
	for k := 1; k < len(count); k++ {
		count[k] += count[k-1]
	}
	b.start = count
	b.items = make([]int, len(pts))
	fill := append([]int(nil), count[:len(count)-1]...)
	for i, p := range pts {
		k := key(p)
		b.items[fill[k]] = i
		fill[k]++
	}
	return b
}

// within returns the indices of the points within radius r of (x, y),
// nearest first (ties by index).
func (b *buckets) within(x, y, r float64) []int {
	if len(b.pts) == 0 {
		return nil
	}
	i0 := max(0, int(math.Floor((x-r-b.x0)/b.cell)))
	i1 := min(b.nx-1, int(math.Floor((x+r-b.x0)/b.cell)))
	j0 := max(0, int(math.Floor((y-r-b.y0)/b.cell)))
	j1 := min(b.ny-1, int(math.Floor((y+r-b.y0)/b.cell)))
	var out []int
	for j := j0; j <= j1; j++ {
		for i := i0; i <= i1; i++ {
			k := j*b.nx + i
			for _, it := range b.items[b.start[k]:b.start[k+1]] {
				p := b.pts[it]
				if (p.x-x)*(p.x-x)+(p.y-y)*(p.y-y) <= r*r {
					out = append(out, it)
				}
			}
		}
	}
	d := func(i int) float64 { p := b.pts[i]; return (p.x-x)*(p.x-x) + (p.y-y)*(p.y-y) }
	sort.Slice(out, func(a, c int) bool {
		da, dc := d(out[a]), d(out[c])
		if da != dc {
			return da < dc
		}
		return out[a] < out[c]
	})
	return out
}

// growGrid orders candidates into a grid: from a seed with two pairs of
// opposite neighbours it grows outward, predicting each next point from
// its neighbours (linear extrapolation along the row or column) and
// taking the nearest candidate within 30 % of the local spacing. It tries
// several seeds (strongest first) and keeps the largest grid. It returns
// the grid positions of the candidates used and the median spacing.
func growGrid(cands []candidate) (map[[2]int]int, float64, error) {
	if len(cands) < 9 {
		return nil, 0, reject(NotFound, "%d candidate points in the image, too few for a target grid", len(cands))
	}
	order := make([]int, len(cands))
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(a, b int) bool { return cands[order[a]].s > cands[order[b]].s })
	bk := newBuckets(cands, 16)
	var best map[[2]int]int
	tried := 0
	for _, seed := range order {
		if tried >= 12 {
			break
		}
		if best != nil {
			if _, used := findValue(best, seed); used {
				continue
			}
		}
		g := growFrom(cands, bk, seed)
		if g == nil {
			continue
		}
		tried++
		if len(g) > len(best) {
			best = g
		}
	}
	if len(best) < 9 {
		return nil, 0, reject(NotFound, "no regular grid of target points found (largest %d points)", len(best))
	}
	var ds []float64
	for key, k := range best {
		if q, ok := best[[2]int{key[0] + 1, key[1]}]; ok {
			ds = append(ds, math.Hypot(cands[q].x-cands[k].x, cands[q].y-cands[k].y))
		}
		if q, ok := best[[2]int{key[0], key[1] + 1}]; ok {
			ds = append(ds, math.Hypot(cands[q].x-cands[k].x, cands[q].y-cands[k].y))
		}
	}
	return best, median(ds), nil
}

func findValue(m map[[2]int]int, v int) ([2]int, bool) {
	for k, x := range m {
		if x == v {
			return k, true
		}
	}
	return [2]int{}, false
}

func growFrom(c []candidate, bk *buckets, seed int) map[[2]int]int {
	s := c[seed]
	nb := bk.within(s.x, s.y, 200)
	if len(nb) < 5 {
		return nil
	}
	nb = nb[1:min(len(nb), 9)]
	at := func(x, y, tol float64) int {
		for _, k := range bk.within(x, y, tol) {
			return k
		}
		return -1
	}
	d1 := [2]float64{c[nb[0]].x - s.x, c[nb[0]].y - s.y}
	l1 := math.Hypot(d1[0], d1[1])
	if l1 < 3 || at(s.x-d1[0], s.y-d1[1], 0.25*l1) < 0 {
		return nil
	}
	var d2 [2]float64
	ok := false
	for _, k := range nb[1:] {
		e := [2]float64{c[k].x - s.x, c[k].y - s.y}
		le := math.Hypot(e[0], e[1])
		if math.Abs(e[0]*d1[0]+e[1]*d1[1])/(le*l1) < 0.5 && le < 2*l1 && at(s.x-e[0], s.y-e[1], 0.25*le) >= 0 {
			d2, ok = e, true
			break
		}
	}
	if !ok {
		return nil
	}
	type node struct {
		key    [2]int
		au, av [2]float64
	}
	grid := map[[2]int]int{{0, 0}: seed}
	used := map[int]bool{seed: true}
	queue := []node{{[2]int{0, 0}, d1, d2}}
	for len(queue) > 0 {
		n := queue[0]
		queue = queue[1:]
		p := c[grid[n.key]]
		for _, d := range [][2]int{{1, 0}, {-1, 0}, {0, 1}, {0, -1}} {
			key := [2]int{n.key[0] + d[0], n.key[1] + d[1]}
			if _, ok := grid[key]; ok {
				continue
			}
			step := [2]float64{float64(d[0])*n.au[0] + float64(d[1])*n.av[0], float64(d[0])*n.au[1] + float64(d[1])*n.av[1]}
			if k, ok := grid[[2]int{n.key[0] - d[0], n.key[1] - d[1]}]; ok {
				step = [2]float64{p.x - c[k].x, p.y - c[k].y}
			}
			ls := math.Hypot(step[0], step[1])
			k := -1
			for _, q := range bk.within(p.x+step[0], p.y+step[1], 0.3*ls) {
				if !used[q] {
					k = q
					break
				}
			}
			if k < 0 {
				continue
			}
			grid[key] = k
			used[k] = true
			m := node{key: key, au: n.au, av: n.av}
			act := [2]float64{c[k].x - p.x, c[k].y - p.y}
			if d[0] != 0 {
				m.au = [2]float64{act[0] * float64(d[0]), act[1] * float64(d[0])}
			} else {
				m.av = [2]float64{act[0] * float64(d[1]), act[1] * float64(d[1])}
			}
			queue = append(queue, m)
		}
	}
	return grid
}

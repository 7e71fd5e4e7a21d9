package calib

import (
	"math"
)

// blob is a dark connected region of the image.
type blob struct {
	x, y float64 // grey-weighted centroid
	area int     // pixels below the threshold
}

// detectDots finds the dot centres of a dot grid: pixels darker than 0.8 of
// their neighbourhood mean (which follows uneven light), joined into
// 4-connected blobs; the centre of each is the centroid of its ink
// (background minus grey, the background taken on the blob's surround).
// The marker dots are told by their area against their grid neighbours.
// Centroids are those of the projected dots, not the projected centres;
// Calibrate corrects that bias (Heikkilä & Silvén 1997).
func detectDots(img gridImg, t *Target, o DetectOptions) (*Detection, error) {
	w, h := img.w, img.h
	rb := max(8, min(w, h)/12)
	// Integral image for the local mean.
	ii := make([]float64, (w+1)*(h+1))
	for y := range h {
		var row float64
		for x := range w {
			row += img.p[y*w+x]
			ii[(y+1)*(w+1)+x+1] = ii[y*(w+1)+x+1] + row
		}
	}
	mean := func(x, y int) float64 {
		x0, y0 := max(0, x-rb), max(0, y-rb)
		x1, y1 := min(w, x+rb+1), min(h, y+rb+1)
		s := ii[y1*(w+1)+x1] - ii[y0*(w+1)+x1] - ii[y1*(w+1)+x0] + ii[y0*(w+1)+x0]
		return s / float64((x1-x0)*(y1-y0))
	}
	dark := make([]bool, w*h)
	for y := range h {
		for x := range w {
			dark[y*w+x] = img.p[y*w+x] < 0.8*mean(x, y)
		}
	}
	label := make([]int32, w*h)
	var blobs []blob
	var stack []int
	maxArea := w * h / 20
	for start := range dark {
		if !dark[start] || label[start] != 0 {
			continue
		}
		id := int32(len(blobs) + 1)
		stack = append(stack[:0], start)
		label[start] = id
		x0, y0, x1, y1 := w, h, -1, -1
		area := 0
		border := false
		for len(stack) > 0 {
			k := stack[len(stack)-1]
			stack = stack[:len(stack)-1]
			x, y := k%w, k/w
			area++
			x0, y0, x1, y1 = min(x0, x), min(y0, y), max(x1, x), max(y1, y)
			if x == 0 || y == 0 || x == w-1 || y == h-1 {
				border = true
			}
			for _, n := range [4]int{k - 1, k + 1, k - w, k + w} {
				if n < 0 || n >= w*h || (n == k-1 && x == 0) || (n == k+1 && x == w-1) {
					continue
				}
				if dark[n] && label[n] == 0 {
					label[n] = id
					stack = append(stack, n)
				}
			}
		}
		blobs = append(blobs, blob{area: -1}) // placeholder keeps ids aligned
		if border || area < 6 || area > maxArea {
			continue
		}
		bw, bh := x1-x0+1, y1-y0+1
		if float64(area) < 0.5*float64(bw*bh) || max(bw, bh) > 4*min(bw, bh) {
			continue // not a filled, compact spot
		}
		// Window: the box grown by a margin; background from its rim.
		m := max(4, int(math.Ceil(0.15*math.Sqrt(float64(area)))))
		wx0, wy0, wx1, wy1 := x0-m, y0-m, x1+m, y1+m
		if wx0 < 0 || wy0 < 0 || wx1 >= w || wy1 >= h {
			continue
		}
		// Background: a plane a + b·x + c·y fitted to the window's rim
		// (least squares, then again without the pixels far below it,
		// which belong to neighbouring dots), so light that changes over
		// the dot does not pull the centroid.
		var rim [][3]float64
		for x := wx0; x <= wx1; x++ {
			rim = append(rim, [3]float64{float64(x), float64(wy0), img.p[wy0*w+x]}, [3]float64{float64(x), float64(wy1), img.p[wy1*w+x]})
		}
		for y := wy0 + 1; y < wy1; y++ {
			rim = append(rim, [3]float64{float64(wx0), float64(y), img.p[y*w+wx0]}, [3]float64{float64(wx1), float64(y), img.p[y*w+wx1]})
		}
		bg, ok := rimPlane(rim, float64(x0+x1)/2, float64(y0+y1)/2)
		if !ok {
			continue
		}
		// Ink weight 1 − I/background: the ink's reflectance contrast,
		// the same over the whole dot whatever the light.
		var sw, sx, sy float64
		for y := wy0; y <= wy1; y++ {
			for x := wx0; x <= wx1; x++ {
				l := label[y*w+x]
				if l != 0 && l != id {
					continue // another blob reaching into the window
				}
				b := bg(float64(x), float64(y))
				if !(b > 0) {
					continue
				}
				v := 1 - img.p[y*w+x]/b
				if v <= 0 {
					continue
				}
				sw += v
				sx += v * float64(x)
				sy += v * float64(y)
			}
		}
		if sw <= 0 {
			continue
		}
		blobs[id-1] = blob{x: sx / sw, y: sy / sw, area: area}
	}
	var cands []candidate
	for _, b := range blobs {
		if b.area > 0 {
			cands = append(cands, candidate{b.x, b.y, float64(b.area)})
		}
	}
	grid, _, err := growGrid(cands)
	if err != nil {
		return nil, err
	}
	pos := map[[2]int][2]float64{}
	for key, k := range grid {
		pos[key] = [2]float64{cands[k].x, cands[k].y}
	}
	if err := gridTilt(pos, o); err != nil {
		return nil, err
	}
	// Marker dots: area over 1.5 times the median of their grid neighbours.
	var marks, markImg [][2]float64
	for _, key := range sortedKeys(grid) {
		k := grid[key]
		var nb []float64
		for _, d := range [][2]int{{1, 0}, {-1, 0}, {0, 1}, {0, -1}, {1, 1}, {-1, -1}, {1, -1}, {-1, 1}} {
			if q, ok := grid[[2]int{key[0] + d[0], key[1] + d[1]}]; ok {
				nb = append(nb, cands[q].s)
			}
		}
		if len(nb) < 3 {
			continue
		}
		if cands[k].s > 1.5*median(nb) {
			marks = append(marks, [2]float64{float64(key[0]), float64(key[1])})
			markImg = append(markImg, [2]float64{cands[k].x, cands[k].y})
		}
	}
	m0 := [2]float64{float64(t.Marker[0][0]), float64(t.Marker[0][1])}
	idx, err := identify(marks, markImg, float64(t.arm()), m0)
	if err != nil {
		return nil, err
	}
	d := &Detection{}
	for _, key := range sortedKeys(grid) {
		c := cands[grid[key]]
		i, j, ok := idx([2]float64{float64(key[0]), float64(key[1])})
		if !ok {
			continue
		}
		f, ok := t.feature(i, j)
		if !ok {
			continue
		}
		d.Points = append(d.Points, Observation{Feature: f, Px: c.x, Py: c.y})
	}
	return d, nil
}

// rimPlane fits a plane to rim samples (x, y, grey) around (cx, cy) and
// returns it as a function; a second fit leaves out samples more than 10 %
// below the first (intrusions of dark neighbours). ok is false for a
// degenerate rim.
func rimPlane(rim [][3]float64, cx, cy float64) (func(x, y float64) float64, bool) {
	fit := func(use func(q [3]float64) bool) (a, b, c float64, ok bool) {
		var m [3][3]float64
		var r [3]float64
		for _, q := range rim {
			if !use(q) {
				continue
			}
			v := [3]float64{1, q[0] - cx, q[1] - cy}
			for i := range 3 {
				for j := range 3 {
					m[i][j] += v[i] * v[j]
				}
				r[i] += v[i] * q[2]
			}
		}
		d := det3(m)
		if !(math.Abs(d) > 1e-9) {
			return 0, 0, 0, false
		}
		var sol [3]float64
		for k := range 3 {
			mk := m
			for i := range 3 {
				mk[i][k] = r[i]
			}
			sol[k] = det3(mk) / d
		}
		return sol[0], sol[1], sol[2], true
	}
	a, b, c, ok := fit(func([3]float64) bool { return true })
	if !ok {
		return nil, false
	}
	a2, b2, c2, ok := fit(func(q [3]float64) bool { return q[2] >= 0.9*(a+b*(q[0]-cx)+c*(q[1]-cy)) })
	if ok {
		a, b, c = a2, b2, c2
	}
	return func(x, y float64) float64 { return a + b*(x-cx) + c*(y-cy) }, true
}

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
		var rim []float64
		for x := wx0; x <= wx1; x++ {
			rim = append(rim, img.p[wy0*w+x], img.p[wy1*w+x])
		}
		for y := wy0 + 1; y < wy1; y++ {
			rim = append(rim, img.p[y*w+wx0], img.p[y*w+wx1])
		}
		bg := median(rim)
		var sw, sx, sy float64
		for y := wy0; y <= wy1; y++ {
			for x := wx0; x <= wx1; x++ {
				l := label[y*w+x]
				if l != 0 && l != id {
					continue // another blob reaching into the window
				}
				v := bg - img.p[y*w+x]
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

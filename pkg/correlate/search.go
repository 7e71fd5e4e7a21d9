package correlate

import (
	"context"
	"math"
	"sync"

	"github.com/mottledic/mottle/pkg/imageio"
)

// Integer-pixel ZNCC search: the template (a zero-mean, unit-norm subset)
// is compared with the deformed image at every integer shift within the
// search radius; the shift of largest ZNCC wins (ties: the first in row-major
// order). The window statistics come from summed-area tables, so the cost is
// one dot product per shift. ZNCC as in Pan, Xie & Wang 2010, "Equivalence of
// digital image correlation criteria for pattern matching", Appl. Opt. 49:5501.

// searchResult is the best integer shift of a template.
type searchResult struct {
	du, dv int
	zncc   float64
	ok     bool
}

// searchInteger finds the shift (du, dv), |du|, |dv| ≤ r, maximising the
// ZNCC of tmpl (side 2m+1, zero mean, unit norm) against img at centre
// (cx+du, cy+dv). Shifts that put the window off the image are skipped.
// Rows of shifts are split over up to threads goroutines; the result does
// not depend on threads.
func searchInteger(ctx context.Context, img *imageio.Gray, tmpl []float64, m, cx, cy, r, threads int) searchResult {
	side := 2*m + 1
	n := float64(side * side)
	dvLo, dvHi := max(-r, m-cy), min(r, img.H-1-m-cy)
	duLo, duHi := max(-r, m-cx), min(r, img.W-1-m-cx)
	if dvLo > dvHi || duLo > duHi {
		return searchResult{}
	}
	// Region of the image touched by any window, with summed-area tables.
	x0, x1 := cx+duLo-m, cx+duHi+m // inclusive
	y0, y1 := cy+dvLo-m, cy+dvHi+m
	rw, rh := x1-x0+1, y1-y0+1
	reg := make([]float64, rw*rh)
	s1 := make([]float64, (rw+1)*(rh+1))
	s2 := make([]float64, (rw+1)*(rh+1))
	for y := 0; y < rh; y++ {
		var a, b float64
		row := img.Pix[(y0+y)*img.Stride+x0:]
		for x := 0; x < rw; x++ {
			v := float64(row[x])
			reg[y*rw+x] = v
			a += v
			b += v * v
			s1[(y+1)*(rw+1)+x+1] = s1[y*(rw+1)+x+1] + a
			s2[(y+1)*(rw+1)+x+1] = s2[y*(rw+1)+x+1] + b
		}
	}
	rows := dvHi - dvLo + 1
	best := make([]searchResult, rows)
	work := func(r0, r1 int) {
		for ri := r0; ri < r1; ri++ {
			if ctx.Err() != nil {
				return
			}
			dv := dvLo + ri
			wy := cy + dv - m - y0 // window top row in reg
			b := searchResult{zncc: math.Inf(-1)}
			for du := duLo; du <= duHi; du++ {
				wx := cx + du - m - x0
				num := dot(tmpl, reg[wy*rw+wx:], side, rw)
				a := (rw + 1)
				sum := s1[(wy+side)*a+wx+side] - s1[wy*a+wx+side] - s1[(wy+side)*a+wx] + s1[wy*a+wx]
				sq := s2[(wy+side)*a+wx+side] - s2[wy*a+wx+side] - s2[(wy+side)*a+wx] + s2[wy*a+wx]
				den := sq - sum*sum/n
				if !(den > 0) {
					continue
				}
				z := num / math.Sqrt(den)
				if z > b.zncc {
					b = searchResult{du: du, dv: dv, zncc: z, ok: true}
				}
			}
			best[ri] = b
		}
	}
	if threads > rows {
		threads = rows
	}
	if threads <= 1 {
		work(0, rows)
	} else {
		var wg sync.WaitGroup
		for t := 0; t < threads; t++ {
			r0, r1 := rows*t/threads, rows*(t+1)/threads
			wg.Add(1)
			go func() { defer wg.Done(); work(r0, r1) }()
		}
		wg.Wait()
	}
	res := searchResult{zncc: math.Inf(-1)}
	for _, b := range best {
		if b.ok && b.zncc > res.zncc {
			res = b
		}
	}
	if ctx.Err() != nil {
		return searchResult{}
	}
	return res
}

// dot returns Σ t[j·side+i]·g[j·stride+i] over a side×side window, with
// four partial sums so that the additions do not wait on each other.
func dot(t, g []float64, side, stride int) float64 {
	var s0, s1, s2, s3 float64
	for j := 0; j < side; j++ {
		tr := t[j*side : j*side+side]
		gr := g[j*stride : j*stride+side]
		gr = gr[:len(tr)]
		i := 0
		for ; i+4 <= len(tr); i += 4 {
			s0 += tr[i] * gr[i]
			s1 += tr[i+1] * gr[i+1]
			s2 += tr[i+2] * gr[i+2]
			s3 += tr[i+3] * gr[i+3]
		}
		for ; i < len(tr); i++ {
			s0 += tr[i] * gr[i]
		}
	}
	return (s0 + s1) + (s2 + s3)
}

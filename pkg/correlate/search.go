package correlate

import (
	"context"
	"math"

	"gonum.org/v1/gonum/dsp/fourier"

	"github.com/mottledic/mottle/pkg/imageio"
)

// Integer-pixel ZNCC search: the template (a zero-mean, unit-norm subset)
// is compared with the deformed image at every integer shift within the
// search radius; the shift of largest ZNCC wins (ties: the first in row-major
// order). The window statistics come from summed-area tables, so the cost is
// one dot product per shift. ZNCC as in Pan, Xie & Wang 2010, "Equivalence of
// digital image correlation criteria for pattern matching", Appl. Opt. 49:5501.
//
// For large searches the dot products of all shifts come at once from the
// cross-correlation theorem (Lewis 1995, "Fast normalized
// cross-correlation", Vision Interface 95: the numerator by FFT, the
// window sums from summed-area tables): a 2-D real FFT of the searched
// region and of the template, their product and one inverse transform,
// O(N² log N) for an N×N region instead of O(shifts × subset).

// searchResult is the best integer shift of a template.
type searchResult struct {
	du, dv int
	zncc   float64
	ok     bool
}

// searchInteger finds the shift (du, dv), |du|, |dv| ≤ r, maximising the
// ZNCC of tmpl (side 2m+1, zero mean, unit norm) against img at centre
// (cx+du, cy+dv). Shifts that put the window off the image are skipped.
// The direct dot products are split by rows of shifts over up to threads
// goroutines, and so are the transforms of the FFT path, taken when it is
// cheaper (a choice by sizes alone). The result does not depend on
// threads.
func searchInteger(ctx context.Context, img *imageio.Gray, tmpl []float64, m, cx, cy, r, threads int) searchResult {
	sr, _ := searchWith(ctx, img, tmpl, m, cx, cy, r, threads, false)
	return sr
}

// searchWith is searchInteger, always by direct dot products if direct is
// set (the reference of the FFT path in tests and benchmarks); it also
// reports whether it took the FFT path.
func searchWith(ctx context.Context, img *imageio.Gray, tmpl []float64, m, cx, cy, r, threads int, direct bool) (searchResult, bool) {
	side := 2*m + 1
	dvLo, dvHi := max(-r, m-cy), min(r, img.H-1-m-cy)
	duLo, duHi := max(-r, m-cx), min(r, img.W-1-m-cx)
	if dvLo > dvHi || duLo > duHi {
		return searchResult{}, false
	}
	// Region of the image touched by any window, with summed-area tables.
	x0, y0 := cx+duLo-m, cy+dvLo-m
	w := searchWindow{side: side, rows: dvHi - dvLo + 1, cols: duHi - duLo + 1}
	w.rw, w.rh = w.cols+side-1, w.rows+side-1
	w.load(img, x0, y0)
	num := make([]float64, w.rows*w.cols)
	nx, ny, useFFT := w.fftSizes()
	useFFT = useFFT && !direct
	if useFFT {
		w.numFFT(num, tmpl, nx, ny, threads)
	} else {
		parallelFor(w.rows, threads, func(r0, r1 int) {
			for ri := r0; ri < r1 && ctx.Err() == nil; ri++ {
				for ci := 0; ci < w.cols; ci++ {
					num[ri*w.cols+ci] = dot(tmpl, w.reg[ri*w.rw+ci:], side, w.rw)
				}
			}
		})
	}
	if ctx.Err() != nil {
		return searchResult{}, useFFT
	}
	res := searchResult{zncc: math.Inf(-1)}
	n := float64(side * side)
	a := w.rw + 1
	for ri := 0; ri < w.rows; ri++ {
		for ci := 0; ci < w.cols; ci++ {
			i00, i01 := ri*a+ci, ri*a+ci+side
			i10, i11 := (ri+side)*a+ci, (ri+side)*a+ci+side
			sum := w.s1[i11] - w.s1[i01] - w.s1[i10] + w.s1[i00]
			sq := w.s2[i11] - w.s2[i01] - w.s2[i10] + w.s2[i00]
			den := sq - sum*sum/n
			if !(den > 0) {
				continue
			}
			if z := num[ri*w.cols+ci] / math.Sqrt(den); z > res.zncc {
				res = searchResult{du: duLo + ci, dv: dvLo + ri, zncc: z, ok: true}
			}
		}
	}
	return res, useFFT
}

// searchWindow is the searched region: rows×cols shifts of a side×side
// window over an rw×rh region, its grey levels and summed-area tables of
// the grey levels and their squares ((rw+1)×(rh+1), zero first row and
// column).
type searchWindow struct {
	side, rows, cols, rw, rh int
	reg, s1, s2              []float64
}

func (w *searchWindow) load(img *imageio.Gray, x0, y0 int) {
	w.reg = make([]float64, w.rw*w.rh)
	w.s1 = make([]float64, (w.rw+1)*(w.rh+1))
	w.s2 = make([]float64, (w.rw+1)*(w.rh+1))
	a := w.rw + 1
	for y := 0; y < w.rh; y++ {
		var s, ss float64
		row := img.Pix[(y0+y)*img.Stride+x0:]
		for x := 0; x < w.rw; x++ {
			v := float64(row[x])
			w.reg[y*w.rw+x] = v
			s += v
			ss += v * v
			w.s1[(y+1)*a+x+1] = w.s1[y*a+x+1] + s
			w.s2[(y+1)*a+x+1] = w.s2[y*a+x+1] + ss
		}
	}
}

// fftSizes returns the transform sizes (at least the region, with no
// prime factor above 5) and whether the FFT path is cheaper than the
// direct dot products, by operation counts: one multiply-add per template
// pixel and shift, against about 3·N·log₂N per complex 1-D transform of
// length N (a real one counts half) over the rows and columns of the two
// forward and the one inverse transform, weighted 3×: gonum's mixed-radix
// transforms took about 1.6 ns per counted operation against 0.55 ns per
// multiply-add (the 2-core machine; the paths cross near a radius of 10
// px for subsets 21 and 31).
func (w *searchWindow) fftSizes() (nx, ny int, ok bool) {
	nx, ny = smooth235(w.rw), smooth235(w.rh)
	direct := float64(w.rows*w.cols) * float64(w.side*w.side)
	lx, ly := math.Log2(float64(nx)), math.Log2(float64(ny))
	fx := float64(nx) * lx * 1.5 // one real transform of a row
	fy := float64(ny) * ly * 3   // one complex transform of a column
	cols := float64(nx/2 + 1)
	fft := float64(w.rh+w.side+w.rows)*fx + 3*cols*fy + 4*cols*float64(ny)
	return nx, ny, 3*fft < direct
}

// smooth235 returns the smallest n' ≥ n whose prime factors are 2, 3 and 5.
func smooth235(n int) int {
	for ; ; n++ {
		k := n
		for _, p := range []int{2, 3, 5} {
			for k%p == 0 {
				k /= p
			}
		}
		if k == 1 {
			return n
		}
	}
}

// numFFT fills num (rows×cols) with the dot products of tmpl with the
// region at every shift, by the cross-correlation theorem on nx×ny
// transforms (zero padding; nx ≥ rw and ny ≥ rh, so no valid shift
// wraps around). With threads ≥ 2 the two forward transforms run at once
// and the inverse is split by columns, then by rows; every 1-D transform
// is the same whichever goroutine computes it, so num does not depend on
// threads.
func (w *searchWindow) numFFT(num, tmpl []float64, nx, ny, threads int) {
	nc := nx/2 + 1
	var R, T []complex128
	if threads >= 2 {
		done := make(chan struct{})
		go func() {
			T = newTransforms(nx, ny).spectrum(tmpl, w.side, w.side)
			close(done)
		}()
		R = newTransforms(nx, ny).spectrum(w.reg, w.rw, w.rh)
		<-done
	} else {
		f := newTransforms(nx, ny)
		R = f.spectrum(w.reg, w.rw, w.rh)
		T = f.spectrum(tmpl, w.side, w.side)
	}
	parallelFor(nc, threads, func(u0, u1 int) {
		f := newTransforms(nx, ny)
		for u := u0; u < u1; u++ {
			c, t := R[u*ny:u*ny+ny], T[u*ny:u*ny+ny]
			for i := range c {
				c[i] *= complex(real(t[i]), -imag(t[i]))
			}
			f.cy.Sequence(f.col, c)
			copy(c, f.col)
		}
	})
	scale := 1 / float64(nx*ny)
	parallelFor(w.rows, threads, func(y0, y1 int) {
		f := newTransforms(nx, ny)
		for y := y0; y < y1; y++ {
			for u := 0; u < nc; u++ {
				f.coef[u] = R[u*ny+y]
			}
			f.rx.Sequence(f.row, f.coef)
			for x := 0; x < w.cols; x++ {
				num[y*w.cols+x] = f.row[x] * scale
			}
		}
	})
}

// transforms are the 1-D transforms of an nx×ny 2-D real FFT and their
// scratch, for one goroutine (gonum's transforms keep work space).
type transforms struct {
	rx   *fourier.FFT
	cy   *fourier.CmplxFFT
	row  []float64
	coef []complex128
	col  []complex128
}

func newTransforms(nx, ny int) *transforms {
	return &transforms{rx: fourier.NewFFT(nx), cy: fourier.NewCmplxFFT(ny),
		row: make([]float64, nx), coef: make([]complex128, nx/2+1), col: make([]complex128, ny)}
}

// spectrum returns the 2-D transform, column-major (nx/2+1 columns of
// ny), of the h rows of width wd of src (stride wd), zero-padded.
func (f *transforms) spectrum(src []float64, wd, h int) []complex128 {
	nc, ny := len(f.coef), len(f.col)
	out := make([]complex128, nc*ny)
	for y := 0; y < h; y++ {
		copy(f.row, src[y*wd:y*wd+wd])
		clear(f.row[wd:])
		f.rx.Coefficients(f.coef, f.row)
		for u, c := range f.coef {
			out[u*ny+y] = c
		}
	}
	for u := 0; u < nc; u++ {
		c := out[u*ny : u*ny+ny]
		f.cy.Coefficients(f.col, c)
		copy(c, f.col)
	}
	return out
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

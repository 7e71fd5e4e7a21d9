package correlate

import (
	"math"
	"unsafe"

	"github.com/mottledic/mottle/pkg/spline"
)

// Points are computed in the order of reliability-guided propagation, so
// consecutive points are seldom neighbours, and the first pass over a
// point's subsets reads them from the shared cache or memory: measured on
// the 1024×1024 benchmark, a point took about 1.4 times as long as the same
// point computed again at once. Prefetching both subsets before the
// prepare lets their cache lines arrive together, instead of one miss
// after another as the passes reach them.

// prefetch asks the processor for the cache lines of the reference subset
// centred at (xc, yc) and of the deformed image under that subset warped
// by p (nil: the reference only): the table cells, or the spline
// coefficients when there is no table.
// It changes no data, so it cannot change a result.
func (s *solver) prefetch(xc, yc float64, p *[12]float64) {
	m := s.m
	fm := float64(m)
	side := 2*m + 1
	if xc-fm >= 0 && yc-fm >= 0 && xc+fm <= float64(s.ref.W-1) && yc+fm <= float64(s.ref.H-1) {
		ix, iy := int(xc), int(yc)
		o := (iy-m)*s.ref.Stride + ix - m
		prefetchSpan(unsafe.Pointer(&s.ref.Pix[o]), side, 4*s.ref.Stride, 4*side)
		o = (iy-m)*s.ref.W + ix - m
		prefetchSpan(unsafe.Pointer(&s.gx[o]), side, 4*s.ref.W, 4*side)
		prefetchSpan(unsafe.Pointer(&s.gy[o]), side, 4*s.ref.W, 4*side)
	}
	if p == nil || !s.tabled() && s.def == nil {
		return
	}
	// The cells that the warped subset covers lie within hx, hy of its
	// warped centre (the first-order terms at the corners plus a bound
	// of the second-order ones); a guess far off is cut to twice the
	// subset.
	q := fm * fm / 2
	hx := fm*(math.Abs(1+p[Ux])+math.Abs(p[Uy])) + q*(math.Abs(p[Uxx])+2*math.Abs(p[Uxy])+math.Abs(p[Uyy]))
	hy := fm*(math.Abs(p[Vx])+math.Abs(1+p[Vy])) + q*(math.Abs(p[Vxx])+2*math.Abs(p[Vxy])+math.Abs(p[Vyy]))
	hx, hy = min(hx, 2*fm), min(hy, 2*fm)
	cx, cy := xc+p[U], yc+p[V]
	var w, h int
	if s.tab != nil {
		w, h = s.tab.W, s.tab.H
	} else if s.rtab != nil {
		w, h = s.rtab.W, s.rtab.H
	} else if s.qtab != nil {
		w, h = s.qtab.W, s.qtab.H
	} else {
		w, h = s.def.W, s.def.H
	}
	if !(cx-hx >= 0 && cy-hy >= 0 && cx+hx < float64(w) && cy+hy < float64(h)) {
		return // also NaN: the pass will reject the guess anyway
	}
	x0, x1 := int(cx-hx), int(cx+hx)
	y0, y1 := int(cy-hy), int(cy+hy)
	if s.tab != nil {
		tab := s.tab.Coefficients()
		prefetchSpan(unsafe.Pointer(&tab[16*(y0*w+x0)]), y1-y0+1, 64*w, 64*(x1-x0+1))
		return
	}
	if s.rtab != nil {
		// Cell rows y0 … y1 read coefficient rows y0−1 … y1+2, which
		// start at table row y0.
		tab := s.rtab.Coefficients()
		prefetchSpan(unsafe.Pointer(&tab[4*(y0*w+x0)]), y1-y0+4, 16*w, 16*(x1-x0+1))
		return
	}
	if s.qtab != nil {
		// Coefficient rows y0−2 … y1+3, from table row y0.
		tab := s.qtab.Coefficients()
		prefetchSpan(unsafe.Pointer(&tab[6*(y0*w+x0)]), y1-y0+6, 24*w, 24*(x1-x0+1))
		return
	}
	// The spline's coefficients: the support reaches r = 1 (cubic) or 2
	// (quintic) cells before the cell of a position and r+1 after it, within
	// the margins.
	c, cs := s.def.Coefficients()
	r := 1
	if s.def.Order() == spline.Quintic {
		r = 2
	}
	o := (y0-r+spline.Margin)*cs + x0 - r + spline.Margin
	prefetchSpan(unsafe.Pointer(&c[o]), y1-y0+2*r+2, 8*cs, 8*(x1-x0+2*r+2))
}

// prefetchSpan prefetches rows rows of n bytes from p, each row stride
// bytes after the one before.
func prefetchSpan(p unsafe.Pointer, rows, stride, n int) {
	a := uintptr(p)
	off := int(a & 63)
	prefetchRows(a-uintptr(off), rows, stride, (off+n+63)>>6)
}

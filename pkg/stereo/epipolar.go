package stereo

import (
	"math"

	"github.com/mottledic/mottle/pkg/imageio"
)

// epiSearch finds a left subset along its epipolar line in the right
// image by ZNCC.
type epiSearch struct {
	tri          *Triangulator
	l, r         *imageio.Gray
	m            int
	zmin, zmax   float64
	tmpl, tx, ty []float64
}

func newEpiSearch(tri *Triangulator, l, r *imageio.Gray, m int, zmin, zmax float64) *epiSearch {
	return &epiSearch{tri: tri, l: l, r: r, m: m, zmin: zmin, zmax: zmax}
}

// template fills the normalised template of the left subset at (x, y),
// every stride-th pixel; false for a blank subset.
func (e *epiSearch) template(x, y, stride int) bool {
	e.tmpl, e.tx, e.ty = e.tmpl[:0], e.tx[:0], e.ty[:0]
	var s float64
	for j := -e.m; j <= e.m; j += stride {
		for i := -e.m; i <= e.m; i += stride {
			v := float64(e.l.At(x+i, y+j))
			e.tmpl = append(e.tmpl, v)
			e.tx = append(e.tx, float64(i))
			e.ty = append(e.ty, float64(j))
			s += v
		}
	}
	mean := s / float64(len(e.tmpl))
	var n float64
	for k := range e.tmpl {
		e.tmpl[k] -= mean
		n += e.tmpl[k] * e.tmpl[k]
	}
	if !(n > 1e-9) {
		return false
	}
	n = math.Sqrt(n)
	for k := range e.tmpl {
		e.tmpl[k] /= n
	}
	return true
}

// zncc returns the ZNCC of the template with the right image around
// (x, y) by bilinear interpolation; ok is false outside the image.
func (e *epiSearch) zncc(x, y float64) (float64, bool) {
	m := float64(e.m)
	if x-m < 0 || y-m < 0 || x+m >= float64(e.r.W-1) || y+m >= float64(e.r.H-1) {
		return 0, false
	}
	var s, ss, st float64
	for k, t := range e.tmpl {
		px, py := x+e.tx[k], y+e.ty[k]
		x0, y0 := int(px), int(py)
		fx, fy := px-float64(x0), py-float64(y0)
		o := y0*e.r.Stride + x0
		a, b := float64(e.r.Pix[o]), float64(e.r.Pix[o+1])
		c, d := float64(e.r.Pix[o+e.r.Stride]), float64(e.r.Pix[o+e.r.Stride+1])
		v := (a*(1-fx)+b*fx)*(1-fy) + (c*(1-fx)+d*fx)*fy
		s += v
		ss += v * v
		st += v * t
	}
	n := float64(len(e.tmpl))
	vr := ss - s*s/n
	if !(vr > 1e-9) {
		return 0, true
	}
	return st / math.Sqrt(vr), true // Σ t = 0, so Σ (v − v̄) t = Σ v t
}

// search returns the right position of the left subset at (x, y): the best
// ZNCC along the epipolar curve (sampled every ~0.7 px in the right image,
// uniformly in inverse depth), with a half-resolution template, refined at
// full resolution around the best sample. ok is false if nothing in the
// right image correlates above 0.5.
func (e *epiSearch) search(x, y float64) (float64, float64, bool) {
	xn, yn, err := e.tri.rig.Left.Normalize(x, y)
	if err != nil {
		return 0, 0, false
	}
	at := func(z float64) (float64, float64, bool) {
		_, r, ok := e.tri.Project([3]float64{xn * z, yn * z, z})
		return r[0], r[1], ok
	}
	ax, ay, ok1 := at(e.zmin)
	bx, by, ok2 := at(e.zmax)
	if !ok1 || !ok2 {
		return 0, 0, false
	}
	L := math.Hypot(bx-ax, by-ay)
	ns := int(math.Min(math.Ceil(1.5*L), 20000)) + 1
	if !e.template(int(x), int(y), 2) {
		return 0, 0, false
	}
	type cand struct{ w, c float64 }
	best := cand{c: -2}
	iz0, iz1 := 1/e.zmin, 1/e.zmax
	for k := range ns {
		w := iz0 + (iz1-iz0)*float64(k)/float64(max(1, ns-1))
		px, py, ok := at(1 / w)
		if !ok {
			continue
		}
		if c, ok := e.zncc(px, py); ok && c > best.c {
			best = cand{w, c}
		}
	}
	if best.c < 0.5 {
		return 0, 0, false
	}
	e.template(int(x), int(y), 1)
	dw := (iz1 - iz0) / float64(max(1, ns-1))
	fine := cand{c: -2}
	for k := -8; k <= 8; k++ {
		w := best.w + dw*float64(k)/4
		px, py, ok := at(1 / w)
		if !ok {
			continue
		}
		if c, ok := e.zncc(px, py); ok && c > fine.c {
			fine = cand{w, c}
		}
	}
	if fine.c < 0.5 {
		return 0, 0, false
	}
	px, py, _ := at(1 / fine.w)
	return px, py, true
}

package correlate

import (
	"math"
	"math/bits"
	"slices"

	"github.com/mottledic/mottle/pkg/spline"
)

// Result is the outcome of Run.
type Result struct {
	// Grid is the lattice of subset centres.
	Grid Grid
	// Points holds one Point per grid point, row-major (Grid.Index);
	// rejected points keep their Status and reason.
	Points []Point
	// Noise is the image noise σ in grey levels used for StdU and StdV.
	Noise float64
	// NoiseSource says where Noise came from: "given" (Options.Noise),
	// "residual" (median over the accepted points of the ZNSSD residual)
	// or "none" (no accepted point).
	NoiseSource string
	// Seeds lists the seed attempts in the order they were made.
	Seeds []Seed
	// Stats summarises the points.
	Stats Stats
	// Options are the options used, with defaults filled in (Mask, Start
	// and Progress as given).
	Options Options
}

// Seed describes one seed attempt.
type Seed struct {
	Index      int     // grid index of the seed point
	X, Y       int     // its reference position
	Auto       bool    // chosen automatically (not from Options.Seeds)
	DU, DV     int     // integer displacement found by the search
	SearchZNCC float64 // ZNCC of the integer match
	OK         bool    // the seed converged above the ZNCC threshold
}

// Stats summarises a Result.
type Stats struct {
	Total       int     // grid points
	OK          int     // accepted points
	Outside     int     // subset not wholly inside the ROI
	LowContrast int     // too little texture
	Diverged    int     // IC-GN failed to converge
	LowZNCC     int     // converged below the threshold
	Unreached   int     // not connected to a seed
	LeftImage   int     // warped subset left the deformed image
	MeanIter    float64 // mean IC-GN iterations of the accepted points
	MeanZNCC    float64 // mean ZNCC of the accepted points
	MedianStdU  float64 // median predicted std of u over the accepted points, px
	MedianStdV  float64 // median predicted std of v, px
}

// finish estimates the noise, fills in the predicted standard deviations
// and the statistics.
func (r *run) finish(res *Result) {
	var s2 []float64
	for k := range r.pts {
		if r.pts[k].Status == OK {
			s2 = append(s2, r.s2[k])
		}
	}
	switch {
	case r.opt.Noise > 0:
		res.Noise, res.NoiseSource = r.opt.Noise, "given"
	case len(s2) > 0:
		// With a Gaussian prefilter the residual holds smoothed noise, of
		// standard deviation σ·Σg² for white noise σ and 1-D kernel g;
		// report σ of the images as recorded.
		var g2 float64
		for _, g := range spline.GaussianKernel(r.opt.Prefilter) {
			g2 += g * g
		}
		res.Noise, res.NoiseSource = math.Sqrt(median(s2))/g2, "residual"
	default:
		res.NoiseSource = "none"
	}
	st := &res.Stats
	st.Total = len(r.pts)
	var su, sv []float64
	for k := range r.pts {
		p := &r.pts[k]
		switch p.Status {
		case OK:
			st.OK++
			p.StdU = res.Noise * math.Sqrt(2*r.hUU[k])
			p.StdV = res.Noise * math.Sqrt(2*r.hVV[k])
			st.MeanIter += float64(p.Iter)
			st.MeanZNCC += p.ZNCC
			su = append(su, p.StdU)
			sv = append(sv, p.StdV)
		case Outside:
			st.Outside++
		case LowContrast:
			st.LowContrast++
		case Diverged:
			st.Diverged++
		case LowZNCC:
			st.LowZNCC++
		case Unreached:
			st.Unreached++
		case LeftImage:
			st.LeftImage++
		}
	}
	if st.OK > 0 {
		st.MeanIter /= float64(st.OK)
		st.MeanZNCC /= float64(st.OK)
		st.MedianStdU = median(su)
		st.MedianStdV = median(sv)
	}
}

// median returns the median of v, reordering v: the middle value, or the
// mean of the two middle values, of v sorted. It selects them instead of
// sorting (finish is serial work of every run: three sorts of 15,000
// values took about 4 ms on a 1024² grid); v must hold no NaN.
func median(v []float64) float64 {
	if len(v) == 0 {
		return 0
	}
	h := len(v) / 2
	selectKth(v, h)
	if len(v)%2 == 1 {
		return v[h]
	}
	// v[h] is the (h+1)-th smallest and v[:h] holds the h smaller ones.
	return (slices.Max(v[:h]) + v[h]) / 2
}

// selectKth reorders v so that v[k] is the value it would have if v were
// sorted, with no larger value before it and no smaller one after it
// (Hoare's selection with a median-of-three pivot; a range that does not
// shrink fast enough is sorted instead).
func selectKth(v []float64, k int) {
	lo, hi := 0, len(v)-1
	for budget := 2 * bits.Len(uint(len(v))); hi > lo; budget-- {
		if budget == 0 {
			slices.Sort(v[lo : hi+1])
			return
		}
		m := lo + (hi-lo)/2
		if v[m] < v[lo] {
			v[m], v[lo] = v[lo], v[m]
		}
		if v[hi] < v[lo] {
			v[hi], v[lo] = v[lo], v[hi]
		}
		if v[hi] < v[m] {
			v[hi], v[m] = v[m], v[hi]
		}
		p := v[m]
		i, j := lo, hi
		for i <= j {
			for v[i] < p {
				i++
			}
			for v[j] > p {
				j--
			}
			if i <= j {
				v[i], v[j] = v[j], v[i]
				i++
				j--
			}
		}
		// Now v[lo:j+1] ≤ p ≤ v[i:hi+1] and v[j+1:i] == p.
		switch {
		case k <= j:
			hi = j
		case k >= i:
			lo = i
		default:
			return
		}
	}
}

package verify

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// Spatial resolution of a subset, from its filtering of a sinusoid.
//
// Derivation (ours; the result is checked numerically in the tests). Let the
// true field across the subset rows be v(k) = A·cos(2πk/p), k = −h…h, with
// the subset centred on a crest, N = 2h + 1. Linearised about the solution,
// IC-GN minimises Σ g_y²·(v(k) − v̂(k))² over the subset, where v̂ is the
// shape function and g_y the image gradient. For a speckle pattern the
// weights g_y² are statistically uniform over the subset, so on average the
// estimate is the unweighted least-squares fit of the shape function's
// polynomial to v (common practice: the subset acts as a low-pass filter).
//
// First order: the basis is {1, k} (and the x terms, which do not vary
// along this cut). cos is even and k is odd, so they are orthogonal over the
// symmetric subset and the fitted value at the centre is simply the mean:
//
//	a(p) = v̂(0)/A = (1/N) Σ_{k=−h}^{h} cos(2πk/p) = sin(πN/p) / (N·sin(π/p)),
//
// the Dirichlet kernel. For N ≫ 1 this is the box-filter response
// sinc = sin(πN/p)/(πN/p). Solving sin w / w = 0.9 gives w = πN/p = 0.78668,
// so the period attenuated by 10 % is
//
//	p₁₀ ≈ πN/0.78668 = 3.9935·N
//
// (the discrete kernel gives 3.978·N at N = 11 and 3.993·N at N = 51).
// Second order adds k² to the basis; the fit then follows the crest's
// curvature and p₁₀ is much shorter. Attenuation computes either case by a
// direct least-squares fit, so the closed form above is its own check.

// Attenuation returns the ratio v̂(0)/A of the least-squares polynomial
// fit of the given order (1 or 2) over a subset of side n to A·cos(2πk/p),
// i.e. the predicted measured amplitude over the true amplitude at a crest.
// It returns an error for n < 3, an even n, order outside 1–2 or p ≤ 0.
func Attenuation(n, order int, p float64) (float64, error) {
	if n < 3 || n%2 == 0 {
		return 0, fmt.Errorf("attenuation: subset %d must be odd and ≥ 3", n)
	}
	if order != 1 && order != 2 {
		return 0, fmt.Errorf("attenuation: shape order %d must be 1 or 2", order)
	}
	if !(p > 0) {
		return 0, fmt.Errorf("attenuation: period %v must be positive", p)
	}
	h := n / 2
	cols := order + 1
	a := mat.NewDense(n, cols, nil)
	b := mat.NewVecDense(n, nil)
	for i := 0; i < n; i++ {
		k := float64(i - h)
		for j := 0; j < cols; j++ {
			a.Set(i, j, math.Pow(k, float64(j)))
		}
		b.SetVec(i, math.Cos(2*math.Pi*k/p))
	}
	var c mat.VecDense
	if err := c.SolveVec(a, b); err != nil {
		return 0, fmt.Errorf("attenuation: least squares: %w", err)
	}
	return c.AtVec(0), nil // value of the fit at k = 0
}

// TheoryPeriod returns the period p at which Attenuation(n, order, p)
// equals level (0 < level < 1), i.e. the predicted spatial resolution of a
// subset of side n; DIC Challenge 2.0 uses level = 0.9. It searches
// p in [n/2, 1000n] by bisection on the main lobe, where the attenuation
// rises monotonically towards 1.
func TheoryPeriod(n, order int, level float64) (float64, error) {
	if !(level > 0 && level < 1) {
		return 0, fmt.Errorf("theory period: level %v must be in (0, 1)", level)
	}
	f := func(p float64) (float64, error) {
		a, err := Attenuation(n, order, p)
		return a - level, err
	}
	lo, hi := float64(n)/2, 1000*float64(n)
	flo, err := f(lo)
	if err != nil {
		return 0, err
	}
	fhi, _ := f(hi)
	if flo > 0 || fhi < 0 {
		return 0, fmt.Errorf("theory period: level %v not bracketed for subset %d", level, n)
	}
	for i := 0; i < 100 && hi-lo > 1e-9*hi; i++ {
		mid := (lo + hi) / 2
		fm, _ := f(mid)
		if fm < 0 {
			lo = mid
		} else {
			hi = mid
		}
	}
	return (lo + hi) / 2, nil
}

package spline

import (
	"bytes"
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os/exec"
	"strconv"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
)

func randomImage(w, h int, seed uint64) *imageio.Gray {
	r := rand.New(rand.NewPCG(seed, 1))
	g := imageio.NewGray(w, h)
	for i := range g.Pix {
		g.Pix[i] = float32(r.IntN(256))
	}
	return g
}

// Interpolating prefiltered coefficients must give back the samples exactly
// (Unser 1999, "Splines: a perfect fit for signal and image processing",
// IEEE Signal Process. Mag. 16(6):22, Sec. "B-spline interpolation"): this
// fails for a wrong pole, gain or boundary initialisation. The poles in
// spline.go (cubic z₁ = √3 − 2, two quintic poles) are from memory; this
// test, and TestMatchesSciPy, are what verify them.
func TestInterpolatesSamples(t *testing.T) {
	for _, order := range []Order{Cubic, Quintic} {
		for _, sz := range [][2]int{{1, 1}, {2, 3}, {3, 2}, {5, 7}, {40, 33}} {
			g := randomImage(sz[0], sz[1], uint64(sz[0]*100+sz[1]))
			s, err := New(g, order)
			if err != nil {
				t.Fatal(err)
			}
			var worst float64
			for y := 0; y < g.H; y++ {
				for x := 0; x < g.W; x++ {
					d := math.Abs(s.At(float64(x), float64(y)) - float64(g.At(x, y)))
					worst = math.Max(worst, d)
				}
			}
			if worst > 1e-9 {
				t.Errorf("%v %dx%d: max |At − sample| = %g, want ≤ 1e-9", order, sz[0], sz[1], worst)
			}
		}
	}
}

// A B-spline of degree n reproduces polynomials of degree ≤ n (Unser 1999);
// away from the mirrored edges the interpolant of a sampled cubic (quintic)
// polynomial must equal the polynomial, and its gradient the polynomial's.
func TestReproducesPolynomials(t *testing.T) {
	const n = 64
	for _, order := range []Order{Cubic, Quintic} {
		deg := int(order)
		p := func(x, y float64) (v, dx, dy float64) {
			a, b := (x-30)/10, (y-30)/10
			v = 50 + math.Pow(a, float64(deg)) - 2*math.Pow(b, float64(deg-1)) + a*b
			dx = (float64(deg)*math.Pow(a, float64(deg-1)) + b) / 10
			dy = (-2*float64(deg-1)*math.Pow(b, float64(deg-2)) + a) / 10
			return
		}
		g := imageio.NewGray(n, n)
		for y := 0; y < n; y++ {
			for x := 0; x < n; x++ {
				v, _, _ := p(float64(x), float64(y))
				g.Set(x, y, float32(v))
			}
		}
		// float32 samples: compare against the polynomial within the
		// rounding of the samples themselves.
		s, err := New(g, order)
		if err != nil {
			t.Fatal(err)
		}
		r := rand.New(rand.NewPCG(7, 7))
		for k := 0; k < 200; k++ {
			x, y := 25+14*r.Float64(), 25+14*r.Float64()
			v, gx, gy := s.Grad(x, y)
			wv, wx, wy := p(x, y)
			if math.Abs(v-wv) > 1e-4 || math.Abs(gx-wx) > 1e-4 || math.Abs(gy-wy) > 1e-4 {
				t.Fatalf("%v at (%.3f, %.3f): got %.6f (%.6f, %.6f), want %.6f (%.6f, %.6f)", order, x, y, v, gx, gy, wv, wx, wy)
			}
			// Bitwise where every product is rounded on its own; where the
			// compiler may fuse multiply-adds, At and Grad round their
			// 16 or 36 products differently, within a few units of 2⁻⁵³
			// of the value (values here are 40–60, coefficients of the
			// same size, so 1e-12 relative is a wide bound).
			if a := s.At(x, y); a != v && (exactRounding || math.Abs(a-v) > 1e-12*math.Abs(v)) {
				t.Fatalf("%v: At = %v differs from Grad value %v", order, a, v)
			}
		}
	}
}

// bspline5 is the centred quintic B-spline by its truncated-power definition
// β⁵(x) = (1/120) Σ_{k=0}^{6} (−1)^k C(6,k) (x + 3 − k)₊⁵ (Unser 1999, eq. for βⁿ).
func bspline5(x float64) float64 {
	binom := [7]float64{1, 6, 15, 20, 15, 6, 1}
	var sum float64
	sign := 1.0
	for k := 0; k < 7; k++ {
		if a := x + 3 - float64(k); a > 0 {
			sum += sign * binom[k] * math.Pow(a, 5)
		}
		sign = -sign
	}
	return sum / 120
}

// bspline3 is the centred cubic B-spline by the same truncated-power
// definition, β³(x) = (1/6) Σ_{k=0}^{4} (−1)^k C(4,k) (x + 2 − k)₊³ (Unser 1999).
func bspline3(x float64) float64 {
	binom := [5]float64{1, 4, 6, 4, 1}
	var sum float64
	sign := 1.0
	for k := 0; k < 5; k++ {
		if a := x + 2 - float64(k); a > 0 {
			sum += sign * binom[k] * a * a * a
		}
		sign = -sign
	}
	return sum / 6
}

// The fast interpolation weights (and their derivatives) must equal the
// B-spline basis evaluated from its definition (bspline3, bspline5), the
// derivatives against central differences of it (common practice).
func TestWeightsMatchDefinition(t *testing.T) {
	for i := 0; i <= 20; i++ {
		tt := float64(i) / 20
		if i == 20 {
			tt = 0.999999
		}
		var c [4]float64
		var cd [4]float64
		cubicWeights(tt, &c)
		cubicDerivWeights(tt, &cd)
		for k := range c {
			x := tt + 1 - float64(k)
			if d := math.Abs(c[k] - bspline3(x)); d > 1e-14 {
				t.Errorf("cubic weight %d at t=%v: %v, want %v", k, tt, c[k], bspline3(x))
			}
			fd := (bspline3(x+1e-6) - bspline3(x-1e-6)) / 2e-6
			if d := math.Abs(cd[k] - fd); d > 1e-7 {
				t.Errorf("cubic derivative weight %d at t=%v: %v, want %v", k, tt, cd[k], fd)
			}
		}
		var q, qd [6]float64
		quinticWeights(tt, &q)
		quinticDerivWeights(tt, &qd)
		for k := range q {
			x := tt + 2 - float64(k)
			// The truncated-power sum cancels badly (≈1e-11 for x near 3).
			if d := math.Abs(q[k] - bspline5(x)); d > 1e-10 {
				t.Errorf("quintic weight %d at t=%v: %v, want %v", k, tt, q[k], bspline5(x))
			}
			fd := (bspline5(x+1e-6) - bspline5(x-1e-6)) / 2e-6
			if d := math.Abs(qd[k] - fd); d > 1e-7 {
				t.Errorf("quintic derivative weight %d at t=%v: %v, want %v", k, tt, qd[k], fd)
			}
		}
	}
}

// Cross-check against SciPy's ndimage.map_coordinates, which evaluates
// prefiltered B-splines of order 3 and 5; mode "mirror" is the whole-sample
// symmetric extension used here (SciPy 1.10 reference documentation).
func TestMatchesSciPy(t *testing.T) {
	if _, err := exec.LookPath("/usr/bin/python3"); err != nil {
		t.Fatalf("reference interpreter /usr/bin/python3 not found (install python3-scipy): %v", err)
	}
	const w, h = 23, 17
	g := randomImage(w, h, 3)
	r := rand.New(rand.NewPCG(11, 12))
	var pts [][2]float64
	for k := 0; k < 300; k++ {
		// Include the border region up to the edge pixels.
		pts = append(pts, [2]float64{r.Float64() * (w - 1), r.Float64() * (h - 1)})
	}
	pts = append(pts, [2]float64{0, 0}, [2]float64{w - 1, h - 1}, [2]float64{0.25, h - 1.5})
	var in bytes.Buffer
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			fmt.Fprintf(&in, "%g ", g.At(x, y))
		}
		in.WriteString("\n")
	}
	in.WriteString("#\n")
	for _, p := range pts {
		fmt.Fprintf(&in, "%.17g %.17g\n", p[0], p[1])
	}
	script := `
import sys, numpy as np
from scipy import ndimage
text = sys.stdin.read().split("#\n")
img = np.array([[float(v) for v in l.split()] for l in text[0].strip().splitlines()])
pts = np.array([[float(v) for v in l.split()] for l in text[1].strip().splitlines()])
for order in (3, 5):
    out = ndimage.map_coordinates(img, [pts[:, 1], pts[:, 0]], order=order, mode="mirror")
    print(" ".join("%.17g" % v for v in out))
`
	cmd := exec.Command("/usr/bin/python3", "-c", script)
	cmd.Stdin = &in
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	out, err := cmd.Output()
	if err != nil {
		t.Fatalf("python3 with scipy failed (apt-get install python3-scipy): %v\n%s", err, stderr.String())
	}
	lines := strings.Split(strings.TrimSpace(string(out)), "\n")
	if len(lines) != 2 {
		t.Fatalf("unexpected scipy output: %q", out)
	}
	for li, order := range []Order{Cubic, Quintic} {
		s, err := New(g, order)
		if err != nil {
			t.Fatal(err)
		}
		fields := strings.Fields(lines[li])
		if len(fields) != len(pts) {
			t.Fatalf("scipy returned %d values, want %d", len(fields), len(pts))
		}
		var worst float64
		for k, f := range fields {
			want, _ := strconv.ParseFloat(f, 64)
			got := s.At(pts[k][0], pts[k][1])
			worst = math.Max(worst, math.Abs(got-want))
		}
		if worst > 1e-8 {
			t.Errorf("%v: max |At − scipy| = %g grey levels, want ≤ 1e-8", order, worst)
		} else {
			t.Logf("%v: max |At − scipy| = %.2g grey levels", order, worst)
		}
	}
}

// The analytic gradient of the interpolant equals a central difference of
// At (common practice; the step 1e-5 px leaves a truncation error far below
// the 1e-4 tolerance for a C² cubic / C⁴ quintic spline).
func TestGradMatchesFiniteDifference(t *testing.T) {
	g := randomImage(30, 30, 9)
	for _, order := range []Order{Cubic, Quintic} {
		s, _ := New(g, order)
		r := rand.New(rand.NewPCG(1, 2))
		for k := 0; k < 100; k++ {
			x, y := 1+27*r.Float64(), 1+27*r.Float64()
			_, gx, gy := s.Grad(x, y)
			const e = 1e-5
			fx := (s.At(x+e, y) - s.At(x-e, y)) / (2 * e)
			fy := (s.At(x, y+e) - s.At(x, y-e)) / (2 * e)
			if math.Abs(gx-fx) > 1e-4 || math.Abs(gy-fy) > 1e-4 {
				t.Fatalf("%v at (%.3f, %.3f): Grad (%v, %v), finite difference (%v, %v)", order, x, y, gx, gy, fx, fy)
			}
		}
	}
}

// SampleGradients is Grad at the pixel centres, to float32 rounding, and
// does not depend on the number of threads (project rule: results never
// depend on scheduling).
func TestSampleGradients(t *testing.T) {
	g := randomImage(37, 29, 5)
	for _, order := range []Order{Cubic, Quintic} {
		s, _ := New(g, order)
		gx1, gy1, err := s.SampleGradients(context.Background(), 1)
		if err != nil {
			t.Fatal(err)
		}
		gx3, gy3, _ := s.SampleGradients(context.Background(), 3)
		for y := 0; y < g.H; y++ {
			for x := 0; x < g.W; x++ {
				i := y*g.W + x
				_, wx, wy := s.Grad(float64(x), float64(y))
				if math.Abs(float64(gx1[i])-wx) > 1e-3 || math.Abs(float64(gy1[i])-wy) > 1e-3 {
					t.Fatalf("%v (%d,%d): SampleGradients (%v,%v), Grad (%v,%v)", order, x, y, gx1[i], gy1[i], wx, wy)
				}
				if gx1[i] != gx3[i] || gy1[i] != gy3[i] {
					t.Fatalf("%v: SampleGradients depends on the number of threads", order)
				}
			}
		}
	}
}

// Non-finite and far-off coordinates must not panic (project rule: bad
// input never panics); the test fails by panicking.
func TestAtNeverPanics(t *testing.T) {
	s, _ := New(randomImage(4, 4, 1), Quintic)
	for _, v := range []float64{math.NaN(), math.Inf(1), math.Inf(-1), -1e300, 1e300, -3, 7} {
		_ = s.At(v, 1)
		_ = s.At(1, v)
		_, _, _ = s.Grad(v, v)
	}
}

func TestBadInput(t *testing.T) {
	nan := imageio.NewGray(3, 3)
	nan.Pix[4] = float32(math.NaN())
	cases := []struct {
		name  string
		g     *imageio.Gray
		order Order
	}{
		{"nil", nil, Cubic},
		{"empty", &imageio.Gray{}, Cubic},
		{"short", &imageio.Gray{W: 3, H: 3, Stride: 3, Pix: make([]float32, 5)}, Cubic},
		{"nan", nan, Cubic},
		{"order", imageio.NewGray(3, 3), 4},
	}
	for _, c := range cases {
		if _, err := New(c.g, c.order); err == nil {
			t.Errorf("%s: New succeeded, want error", c.name)
		}
	}
	if _, err := Smooth(imageio.NewGray(3, 3), -1); err == nil {
		t.Error("Smooth(σ = −1) succeeded, want error")
	}
}

// A normalised Gaussian keeps a constant image constant and preserves the
// mean of a linear ramp away from the edges (common practice).
func TestSmooth(t *testing.T) {
	g := imageio.NewGray(40, 30)
	for y := 0; y < 30; y++ {
		for x := 0; x < 40; x++ {
			g.Set(x, y, float32(3*x+2*y+10))
		}
	}
	s, err := Smooth(g, 1.2)
	if err != nil {
		t.Fatal(err)
	}
	for y := 5; y < 25; y++ {
		for x := 5; x < 35; x++ {
			if d := math.Abs(float64(s.At(x, y) - g.At(x, y))); d > 1e-3 {
				t.Fatalf("(%d,%d): smoothed ramp %v, want %v", x, y, s.At(x, y), g.At(x, y))
			}
		}
	}
	rnd := randomImage(40, 30, 2)
	sm, _ := Smooth(rnd, 1)
	var v0, v1 float64
	for i := range rnd.Pix {
		v0 += float64(rnd.Pix[i]-127.5) * float64(rnd.Pix[i]-127.5)
		v1 += float64(sm.Pix[i]-127.5) * float64(sm.Pix[i]-127.5)
	}
	if v1 >= v0/2 {
		t.Errorf("smoothing white noise kept variance ratio %v, want < 0.5", v1/v0)
	}
}

func BenchmarkAtCubic(b *testing.B)   { benchAt(b, Cubic) }
func BenchmarkAtQuintic(b *testing.B) { benchAt(b, Quintic) }

func benchAt(b *testing.B, o Order) {
	s, _ := New(randomImage(256, 256, 1), o)
	b.ReportAllocs()
	var sum float64
	x, y := 10.3, 20.7
	for b.Loop() {
		sum += s.AtInside(x, y)
		x += 0.37
		if x > 240 {
			x = 10.3
		}
	}
	_ = sum
}

// The batched evaluators Line and Points agree with At (internal
// consistency; At itself is checked against SciPy above).
func TestLineAndPointsMatchAt(t *testing.T) {
	g := randomImage(50, 40, 4)
	for _, order := range []Order{Cubic, Quintic} {
		s, _ := New(g, order)
		out := make([]float64, 31)
		s.Line(3.7, 5.2, 1.03, 0.21, out)
		xs, ys := make([]float64, 31), make([]float64, 31)
		for k := range out {
			xs[k], ys[k] = 3.7+float64(k)*1.03, 5.2+float64(k)*0.21
			if d := math.Abs(out[k] - s.At(xs[k], ys[k])); d > 1e-9 {
				t.Fatalf("%v: Line[%d] = %v, At = %v", order, k, out[k], s.At(xs[k], ys[k]))
			}
		}
		pts := make([]float64, 31)
		s.Points(xs, ys, pts)
		for k := range pts {
			if pts[k] != s.At(xs[k], ys[k]) {
				t.Fatalf("%v: Points[%d] = %v, At = %v", order, k, pts[k], s.At(xs[k], ys[k]))
			}
		}
	}
}

func BenchmarkLineCubic(b *testing.B) {
	s, _ := New(randomImage(256, 256, 1), Cubic)
	out := make([]float64, 31)
	b.ReportAllocs()
	for b.Loop() {
		s.Line(10.3, 20.7, 1.01, 0.02, out)
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*len(out)), "ns/sample")
}

// The blocked column filter, the four-row filter (both with the gain taken
// into the first causal recursion past the samples the causal sum reads)
// and the row-reusing gradient sums must give bitwise the values of the
// plain forms they replace: filter1D on each row and column copied out, and
// each pixel's (2r+1)² neighbourhood summed directly. The sizes put rows
// and columns on both sides of the causal sums' horizons (30 samples
// cubic, 47 and 12 quintic).
func TestBlockedFiltersMatchPlain(t *testing.T) {
	for _, size := range [][2]int{{53, 41}, {131, 97}, {20, 29}} {
		testBlockedFilters(t, size[0], size[1])
	}
}

func testBlockedFilters(t *testing.T, w, h int) {
	g := randomImage(w, h, 9) // 53 columns: three full blocks and a partial one (also 131, 20)
	for _, order := range []Order{Cubic, Quintic} {
		s, err := NewContext(context.Background(), g, order, 3)
		if err != nil {
			t.Fatal(err)
		}
		// Plain: rows then each column on its own.
		cs := s.cs
		c := make([]float64, len(s.c))
		for y := 0; y < h; y++ {
			row := c[(y+pad)*cs+pad : (y+pad)*cs+pad+w]
			for x := range row {
				row[x] = float64(g.Pix[y*g.Stride+x])
			}
			filter1D(row, 1, w, polesOf(order))
		}
		for x := 0; x < w; x++ {
			col := make([]float64, h)
			for y := range col {
				col[y] = c[(y+pad)*cs+pad+x]
			}
			filter1D(col, 1, h, polesOf(order))
			for y := range col {
				c[(y+pad)*cs+pad+x] = col[y]
			}
		}
		for y := 0; y < h; y++ {
			for x := 0; x < w; x++ {
				k := (y+pad)*cs + pad + x
				if math.Float64bits(c[k]) != math.Float64bits(s.c[k]) {
					t.Fatalf("%d×%d %v: coefficient (%d, %d) is %v, plain filters %v", w, h, order, x, y, s.c[k], c[k])
				}
			}
		}
		// Plain gradient sums over the neighbourhood of each pixel.
		var wv, wd []float64
		if order == Cubic {
			var a, b [4]float64
			cubicWeights(0, &a)
			cubicDerivWeights(0, &b)
			wv, wd = a[:3], b[:3]
		} else {
			var a, b [6]float64
			quinticWeights(0, &a)
			quinticDerivWeights(0, &b)
			wv, wd = a[:5], b[:5]
		}
		r := len(wv) / 2
		gx, gy, err := s.SampleGradients(context.Background(), 2)
		if err != nil {
			t.Fatal(err)
		}
		for y := 0; y < h; y++ {
			for x := 0; x < w; x++ {
				var sx, sy float64
				for j := -r; j <= r; j++ {
					row := s.c[(y+j+pad)*cs+x+pad-r : (y+j+pad)*cs+x+pad+r+1]
					var v, d float64
					for i := range row {
						v += wv[i] * row[i]
						d += wd[i] * row[i]
					}
					sx += wv[j+r] * d
					sy += wd[j+r] * v
				}
				if gx[y*w+x] != float32(sx) || gy[y*w+x] != float32(sy) {
					t.Fatalf("%v: gradient at (%d, %d) is (%v, %v), plain sum (%v, %v)", order, x, y, gx[y*w+x], gy[y*w+x], sx, sy)
				}
			}
		}
	}
}

// Smooth in steps, rows in any order, gives bitwise the plain convolution
// it replaces (each pixel's taps summed in order, mirrored at the edges),
// also for images narrower than the kernel.
func TestSmoothingMatchesPlain(t *testing.T) {
	for _, c := range []struct {
		w, h  int
		sigma float64
	}{{37, 29, 0.8}, {5, 40, 2}, {30, 3, 1.3}, {12, 12, 0}} {
		g := randomImage(c.w, c.h, 3)
		sm, err := NewSmoothing(g, c.sigma)
		if err != nil {
			t.Fatal(err)
		}
		for y := c.h - 1; y >= 0; y-- {
			sm.Rows(y, y+1)
		}
		if err := sm.Err(); err != nil {
			t.Fatal(err)
		}
		for y := 0; y < c.h; y += 2 {
			sm.Columns(y, min(y+2, c.h))
		}
		got := sm.Result()
		k := GaussianKernel(c.sigma)
		r := len(k) / 2
		tmp := make([]float64, c.w*c.h)
		for y := 0; y < c.h; y++ {
			for x := 0; x < c.w; x++ {
				var s float64
				for i, kv := range k {
					s += kv * float64(g.Pix[y*g.Stride+mirrorIndex(x+i-r, c.w)])
				}
				tmp[y*c.w+x] = s
			}
		}
		for y := 0; y < c.h; y++ {
			for x := 0; x < c.w; x++ {
				var s float64
				for i, kv := range k {
					s += kv * tmp[mirrorIndex(y+i-r, c.h)*c.w+x]
				}
				want := float32(s)
				if c.sigma == 0 {
					want = g.Pix[y*g.Stride+x]
				}
				if math.Float32bits(got.Pix[y*c.w+x]) != math.Float32bits(want) {
					t.Fatalf("%dx%d σ %v: pixel (%d, %d) is %v, plain %v", c.w, c.h, c.sigma, x, y, got.Pix[y*c.w+x], want)
				}
			}
		}
	}
	nan := randomImage(6, 6, 1)
	nan.Pix[3*nan.Stride+2] = float32(math.Inf(-1))
	if _, err := Smooth(nan, 1); err == nil || !strings.Contains(err.Error(), "(2, 3)") {
		t.Errorf("Smooth of an image with -Inf at (2, 3): %v", err)
	}
}

package synth

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"sync"
	"sync/atomic"

	"gonum.org/v1/gonum/integrate/quad"

	"github.com/mottledic/mottle/pkg/imageio"
)

// RenderOptions describe the camera. The zero value of a field means its
// default, listed with each field.
type RenderOptions struct {
	// W, H are the image size in px. Required.
	W, H int `json:"-"`
	// Supersample is the number of samples per pixel side used to
	// integrate the pattern over the pixel: an n×n Gauss–Legendre product
	// rule, or an n×n regular grid (the midpoint rule) when Midpoint is
	// set. Default 4.
	Supersample int `json:"supersample"`
	// Midpoint selects the midpoint rule for pixel integration. Its sample
	// offsets are dyadic fractions when Supersample is a power of two, so
	// an integer translation reproduces the reference bit for bit, but
	// it is less accurate: with the default pattern its error is about
	// 0.4 grey levels RMS (8-bit) at n = 4, against 0.05 for Gauss–Legendre.
	Midpoint bool `json:"midpoint,omitempty"`
	// Fill is the fill factor: the side of the light-sensitive square of
	// a pixel as a fraction of the pixel pitch, in (0, 1]. Default 1.
	Fill float64 `json:"fill_factor"`
	// Blur is the standard deviation in px of a Gaussian lens blur applied
	// to the pixel-integrated image (a sampled, normalised kernel cut at
	// 4σ; the image is rendered with a margin so the edges are exact).
	// Default 0 (off).
	Blur float64 `json:"blur_px"`
	// Noise is the standard deviation of additive Gaussian sensor noise, in
	// grey levels. Default 0 (off).
	Noise float64 `json:"noise_sigma"`
	// Bits is the bit depth to quantise to: 8, 12 or 16. Default 8.
	Bits int `json:"bits"`
	// Float skips quantisation and clipping: the image keeps float grey
	// levels (Gray.Bits = 0). For tests of the renderer itself.
	Float bool `json:"float,omitempty"`
	// Gain is the grey level of pattern value 1 (white). Default 2^Bits − 1.
	Gain float64 `json:"gain"`
	// Offset is added to every grey level (a black level). Default 0.
	Offset float64 `json:"offset"`
	// Void is the pattern value (grey fraction) where no material is seen,
	// e.g. through a hole. Default 0 (black).
	Void float64 `json:"void"`
	// Seed seeds the noise. Each row draws from its own generator seeded
	// with (Seed, row), so images do not depend on GOMAXPROCS or Workers.
	Seed int64 `json:"noise_seed"`
	// Workers is the number of goroutines; 0 means GOMAXPROCS. Results do
	// not depend on it.
	Workers int `json:"-"`
}

// WithDefaults returns o with zero fields replaced by their defaults (the
// values Render uses).
func (o RenderOptions) WithDefaults() RenderOptions { return o.withDefaults() }

func (o RenderOptions) withDefaults() RenderOptions {
	if o.Supersample == 0 {
		o.Supersample = 4
	}
	if o.Fill == 0 {
		o.Fill = 1
	}
	if o.Bits == 0 {
		o.Bits = 8
	}
	if o.Gain == 0 {
		o.Gain = float64(int(1)<<o.Bits - 1)
		if o.Bits > 16 || o.Bits < 1 {
			o.Gain = 255
		}
	}
	if o.Workers <= 0 {
		o.Workers = runtime.GOMAXPROCS(0)
	}
	return o
}

// maxRenderPixels bounds the image size a request may ask for.
const maxRenderPixels = 1 << 26

// Validate reports every problem of o (after defaults) at once.
func (o RenderOptions) Validate() error {
	o = o.withDefaults()
	var errs []error
	if o.W <= 0 || o.H <= 0 || int64(o.W)*int64(o.H) > maxRenderPixels {
		errs = append(errs, fmt.Errorf("render size %d×%d px: use a positive size of at most %d px in total", o.W, o.H, maxRenderPixels))
	}
	if o.Supersample < 1 || o.Supersample > 32 {
		errs = append(errs, fmt.Errorf("render supersample %d: use 1–32 samples per pixel side (4 is plenty)", o.Supersample))
	}
	if !(o.Fill > 0 && o.Fill <= 1) {
		errs = append(errs, fmt.Errorf("render fill factor %g: use a fraction in (0, 1]", o.Fill))
	}
	if !(o.Blur >= 0 && o.Blur <= 50) {
		errs = append(errs, fmt.Errorf("render blur %g px: use a standard deviation in [0, 50] px", o.Blur))
	}
	if !(o.Noise >= 0) || math.IsInf(o.Noise, 0) {
		errs = append(errs, fmt.Errorf("render noise %g: use a standard deviation ≥ 0 in grey levels", o.Noise))
	}
	if _, err := imageio.MaxLevel(o.Bits); err != nil && !o.Float {
		errs = append(errs, fmt.Errorf("render bits: %w", err))
	}
	if math.IsNaN(o.Gain) || math.IsInf(o.Gain, 0) || math.IsNaN(o.Offset) || math.IsInf(o.Offset, 0) {
		errs = append(errs, fmt.Errorf("render gain %g / offset %g: use finite numbers", o.Gain, o.Offset))
	}
	if !(o.Void >= 0 && o.Void <= 1) {
		errs = append(errs, fmt.Errorf("render void %g: use a grey fraction in [0, 1]", o.Void))
	}
	return errors.Join(errs...)
}

// Report tells how a rendering went.
type Report struct {
	// Samples is the number of pattern samples taken.
	Samples int `json:"samples"`
	// Void is the number of samples that saw no material (inside a hole).
	Void int `json:"void_samples"`
	// Failed is the number of samples where κ⁻¹ could not be found to
	// better than 1e-8 px; they were rendered with the Void value.
	Failed int `json:"failed_samples"`
	// FailedPixels lists up to 100 pixels (x, y) holding failed samples.
	FailedPixels [][2]int `json:"failed_pixels,omitempty"`
}

// maxFailedList caps Report.FailedPixels.
const maxFailedList = 100

// nearInverse is implemented by motions whose Newton inverse can start
// from a nearby solution, which saves iterations when sampling a row.
type nearInverse interface {
	inverseFrom(x, y, X0, Y0 float64) (X, Y float64, err error)
}

// Render renders the w×h image that a camera sees when the pattern p has
// moved by m (nil means the identity: the reference image). Each pixel is
// the integral of the pattern at X = κ⁻¹(x) over the light-sensitive part
// of the pixel, by a Supersample×Supersample product rule (Gauss–Legendre,
// or the midpoint rule; see RenderOptions.Midpoint); then lens blur,
// then noise, then grey = Offset + Gain·value, quantisation and clipping.
// Blur acts on the image before noise because it is an optical effect.
//
// The result does not depend on GOMAXPROCS. Samples whose inverse fails
// are counted in the Report (and drawn with the Void value); Render does
// not return an error for them.
func Render(p *Pattern, m Motion, o RenderOptions) (*imageio.Gray, Report, error) {
	if p == nil {
		return nil, Report{}, errors.New("render: nil pattern")
	}
	if m == nil {
		m = Identity{}
	}
	return render(p, m, o)
}

// inverter is what render needs of a motion: the reference point seen at
// an image point.
type inverter interface {
	Inverse(x, y float64) (X, Y float64, err error)
}

// render is Render for any surface and any inverse mapping (a motion, or a
// camera view; see RenderView).
func render(p Surface, m inverter, o RenderOptions) (*imageio.Gray, Report, error) {
	if err := o.Validate(); err != nil {
		return nil, Report{}, err
	}
	o = o.withDefaults()
	margin := 0
	var kernel []float64
	if o.Blur > 0 {
		margin = int(math.Ceil(4 * o.Blur))
		kernel = make([]float64, 2*margin+1)
		var s float64
		for i := range kernel {
			d := float64(i - margin)
			kernel[i] = math.Exp(-d * d / (2 * o.Blur * o.Blur))
			s += kernel[i]
		}
		for i := range kernel {
			kernel[i] /= s
		}
	}
	cw, ch := o.W+2*margin, o.H+2*margin
	canvas := make([]float64, cw*ch)

	n := o.Supersample
	offs, wts := make([]float64, n), make([]float64, n)
	if o.Midpoint {
		for i := range offs {
			offs[i] = o.Fill * ((float64(i)+0.5)/float64(n) - 0.5)
			wts[i] = 1 / float64(n)
		}
	} else {
		quad.Legendre{}.FixedLocations(offs, wts, -o.Fill/2, o.Fill/2)
		for i := range wts {
			wts[i] /= o.Fill
		}
	}
	near, hasNear := m.(nearInverse)
	_, isIdentity := m.(Identity)

	type rowStat struct {
		void, failed int
		pixels       [][2]int
	}
	stats := make([]rowStat, ch)
	rows := func(y int) {
		st := &stats[y]
		line := canvas[y*cw : (y+1)*cw]
		py := float64(y - margin)
		var pX, pY, px0, py0 float64 // last solution, for warm starts
		have := false
		for x := range line {
			pxc := float64(x - margin)
			var sum float64
			bad := false
			for iy, oy := range offs {
				sy := py + oy
				for ix, ox := range offs {
					sx := pxc + ox
					w := wts[iy] * wts[ix]
					var X, Y float64
					var err error
					switch {
					case isIdentity:
						X, Y = sx, sy
					case hasNear && have:
						X, Y, err = near.inverseFrom(sx, sy, pX+(sx-px0), pY+(sy-py0))
					default:
						X, Y, err = m.Inverse(sx, sy)
					}
					if err != nil {
						have = false
						if errors.Is(err, ErrNoMaterial) {
							st.void++
						} else {
							st.failed++
							bad = true
						}
						sum += w * o.Void
						continue
					}
					pX, pY, px0, py0, have = X, Y, sx, sy, true
					sum += w * p.Value(X, Y)
				}
			}
			line[x] = sum
			if bad && x >= margin && x < margin+o.W && y >= margin && y < margin+o.H && len(st.pixels) < maxFailedList {
				st.pixels = append(st.pixels, [2]int{x - margin, y - margin})
			}
		}
	}
	parallel(ch, o.Workers, rows)

	rep := Report{Samples: cw * ch * n * n}
	for _, st := range stats {
		rep.Void += st.void
		rep.Failed += st.failed
		for _, px := range st.pixels {
			if len(rep.FailedPixels) < maxFailedList {
				rep.FailedPixels = append(rep.FailedPixels, px)
			}
		}
	}

	// Lens blur: separable convolution, horizontal then vertical.
	if kernel != nil {
		tmp := make([]float64, o.W*ch)
		parallel(ch, o.Workers, func(y int) {
			src := canvas[y*cw : (y+1)*cw]
			dst := tmp[y*o.W : (y+1)*o.W]
			for x := range dst {
				var s float64
				for k, w := range kernel {
					s += w * src[x+k]
				}
				dst[x] = s
			}
		})
		out := canvas[:o.W*o.H]
		parallel(o.H, o.Workers, func(y int) {
			dst := out[y*o.W : (y+1)*o.W]
			for x := range dst {
				var s float64
				for k, w := range kernel {
					s += w * tmp[(y+k)*o.W+x]
				}
				dst[x] = s
			}
		})
		canvas = out
	}

	g := imageio.NewGray(o.W, o.H)
	maxLevel, _ := imageio.MaxLevel(o.Bits)
	parallel(o.H, o.Workers, func(y int) {
		src := canvas[y*o.W : (y+1)*o.W]
		dst := g.Pix[y*g.Stride : y*g.Stride+o.W]
		var rng *rand.Rand
		if o.Noise > 0 {
			rng = rand.New(rand.NewPCG(uint64(o.Seed), uint64(y)*0x9e3779b97f4a7c15+1))
		}
		for x, v := range src {
			grey := o.Offset + o.Gain*v
			if rng != nil {
				grey += o.Noise * rng.NormFloat64()
			}
			if !o.Float {
				grey = math.Max(0, math.Min(maxLevel, math.Round(grey)))
			}
			dst[x] = float32(grey)
		}
	})
	if !o.Float {
		g.Bits = o.Bits
	}
	return g, rep, nil
}

// parallel calls f(i) for i in [0, n) on up to workers goroutines.
func parallel(n, workers int, f func(i int)) {
	workers = max(1, min(workers, n))
	if workers == 1 {
		for i := range n {
			f(i)
		}
		return
	}
	var next atomic.Int64
	var wg sync.WaitGroup
	for range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				i := int(next.Add(1) - 1)
				if i >= n {
					return
				}
				f(i)
			}
		}()
	}
	wg.Wait()
}

// BoundsFor returns the reference-point region a pattern needs so that
// both the reference image and the image deformed by m (each w×h px) see
// the stationary pattern: the image area joined with κ⁻¹ of the border of
// the deformed image (sampled every 4 px), grown by margin px.
// Border points whose inverse fails are skipped.
func BoundsFor(m Motion, w, h int, margin float64) Rect {
	r := ImageRect(w, h, 0)
	if m != nil {
		add := func(x, y float64) {
			X, Y, err := m.Inverse(x, y)
			if err != nil || math.IsNaN(X) || math.IsNaN(Y) {
				return
			}
			r.X0, r.X1 = math.Min(r.X0, X), math.Max(r.X1, X)
			r.Y0, r.Y1 = math.Min(r.Y0, Y), math.Max(r.Y1, Y)
		}
		x0, y0, x1, y1 := -0.5, -0.5, float64(w)-0.5, float64(h)-0.5
		for x := x0; ; x = math.Min(x+4, x1) {
			add(x, y0)
			add(x, y1)
			if x == x1 {
				break
			}
		}
		for y := y0; ; y = math.Min(y+4, y1) {
			add(x0, y)
			add(x1, y)
			if y == y1 {
				break
			}
		}
	}
	r.X0 -= margin
	r.Y0 -= margin
	r.X1 += margin
	r.Y1 += margin
	return r
}

// PatternFor draws a pattern whose Bounds cover the reference and the
// deformed w×h images of m (see BoundsFor), with a margin of 2 speckle
// diameters, unless po.Bounds is already set.
func PatternFor(po PatternOptions, m Motion, w, h int) (*Pattern, error) {
	if po.Bounds.Empty() {
		d := po.withDefaults().Diameter
		po.Bounds = BoundsFor(m, w, h, 2*d)
	}
	return NewPattern(po)
}

// Pair renders a reference image and an image deformed by m of the same
// pattern, for tests and demos. The reference is rendered with Reference(m)
// and noise seed ro.Seed, the deformed image with noise seed ro.Seed + 1.
// If po.Bounds is empty it is set by PatternFor. Pair returns an error if
// any sample's inverse failed (a Report with Failed > 0).
func Pair(po PatternOptions, m Motion, ro RenderOptions) (ref, def *imageio.Gray, err error) {
	if m == nil {
		m = Identity{}
	}
	p, err := PatternFor(po, m, ro.W, ro.H)
	if err != nil {
		return nil, nil, err
	}
	ref, rr, err := Render(p, Reference(m), ro)
	if err != nil {
		return nil, nil, err
	}
	ro.Seed++
	def, rd, err := Render(p, m, ro)
	if err != nil {
		return nil, nil, err
	}
	if rr.Failed+rd.Failed > 0 {
		return nil, nil, fmt.Errorf("%w: %d samples of the deformed image (first pixels %v)", ErrNoInverse, rd.Failed+rr.Failed, rd.FailedPixels)
	}
	return ref, def, nil
}

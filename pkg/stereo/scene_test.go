package stereo

import (
	"image"
	"math"
	"testing"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
	"github.com/mottledic/mottle/pkg/spline"
	"github.com/mottledic/mottle/pkg/synth"
)

// The figures' scene (invented): the bench of synth.BenchRig — two cameras
// 500 mm from the specimen, 25° between their axes, about 100 mm across
// the image — rendered exactly by pkg/synth at figW×figH px. The figures
// are measured over the central figROI of the left image (about 44 × 31 mm
// of the specimen), and only the pixels that its points can reach are
// rendered, so that eight pattern seeds stay cheap.
const figW, figH = 1024, 768

// figROI is the left region of interest of the figures.
var figROI = image.Rect(288, 224, 736, 544)

// seeds is the number of pattern seeds of every figure.
const seeds = 8

// scaled is a pattern drawn in units of 0.1 mm.
type scaled struct{ p *synth.Pattern }

func (s scaled) Value(X, Y float64) float64 { return s.p.Value(10*X, 10*Y) }

// pattern returns the speckle pattern of a seed painted on the specimens:
// speckles of 0.45 mm (about 4.5 px).
func pattern(t testing.TB, seed int64) synth.Surface {
	t.Helper()
	p, err := synth.NewPattern(synth.PatternOptions{Diameter: 4.5, Seed: 10 + seed,
		Bounds: synth.Rect{X0: -750, Y0: -600, X1: 750, Y1: 600}})
	if err != nil {
		t.Fatal(err)
	}
	return scaled{p}
}

// window returns the pixels of camera c that can see the material points
// the left camera sees in figROI on the reference placement ref, once
// placed by p, with a margin for the subsets and the interpolation.
func window(t testing.TB, ref, p synth.Placement, lc, c synth.Cam) image.Rectangle {
	t.Helper()
	x0, y0, x1, y1 := math.Inf(1), math.Inf(1), math.Inf(-1), math.Inf(-1)
	r := figROI
	for y := r.Min.Y; y <= r.Max.Y; y += 16 {
		for x := r.Min.X; x <= r.Max.X; x += 16 {
			if x != r.Min.X && y != r.Min.Y && x+16 <= r.Max.X && y+16 <= r.Max.Y {
				continue // the border is enough for these smooth shapes
			}
			s, u, err := synth.SeenAt(ref, lc, float64(x), float64(y))
			if err != nil {
				t.Fatal(err)
			}
			px, py, ok := c.Project(p.Position(s, u))
			if !ok {
				t.Fatalf("material point (%g, %g) is behind a camera", s, u)
			}
			x0, y0, x1, y1 = math.Min(x0, px), math.Min(y0, py), math.Max(x1, px), math.Max(y1, py)
		}
	}
	const margin = 48
	return image.Rect(int(x0)-margin, int(y0)-margin, int(x1)+margin, int(y1)+margin).Intersect(image.Rect(0, 0, figW, figH))
}

// scene is one seed's rendering context.
type scene struct {
	t    testing.TB
	seed int64
	pat  synth.Surface
	ref  synth.Placement // the reference placement of the pairs rendered next
}

func newScene(t testing.TB, seed int64) *scene {
	return &scene{t: t, seed: seed, pat: pattern(t, seed)}
}

// pair renders the placed specimen p in both cameras, the material points
// of figROI on the reference placement ref; k varies the noise.
func (s *scene) pair(ref, p synth.Placement, k int64) (l, r *imageio.Gray) {
	s.t.Helper()
	lc, rc := synth.BenchRig(figW, figH)
	var out [2]*imageio.Gray
	for i, c := range []synth.Cam{lc, rc} {
		o := synth.RenderOptions{W: figW, H: figH, Supersample: 2, Noise: 0.5, Seed: 100*s.seed + 2*k + int64(i)}
		g, _, err := synth.RenderSurfaceWindow(s.pat, p, c, o, window(s.t, ref, p, lc, c))
		if err != nil {
			s.t.Fatal(err)
		}
		out[i] = g
	}
	return out[0], out[1]
}

// figOptions are the subset settings of the figures: 31 px subsets on a
// 24 px grid over figROI, second-order shape function, quintic
// interpolation, and a Gaussian prefilter of σ = 0.7 px against
// interpolation bias (without it the tilted-stretch strain scatters 10×
// more, in bands that follow the sub-pixel part of the displacement: the
// bias of Schreier, Braasch & Sutton 2000, "Systematic errors in digital
// image correlation caused by intensity interpolation", Opt. Eng.
// 39:2915).
func figOptions(t testing.TB) Options {
	m, err := roi.Spec{Rect: &[4]int{figROI.Min.X, figROI.Min.Y, figROI.Max.X, figROI.Max.Y}}.Mask(figW, figH)
	if err != nil {
		t.Fatal(err)
	}
	return Options{Correlate: correlate.Options{Subset: 31, Step: 24, Interp: spline.Quintic, Prefilter: 0.7, Mask: m}}
}

// shapeError returns the RMS and the largest distance between each OK
// point's position and the true position of the material point seen at its
// left reference pixel.
func shapeError(t testing.TB, ref *Reference, pl synth.Placement) (rms, worst float64, n int) {
	lc, _ := synth.BenchRig(figW, figH)
	var s float64
	for _, p := range ref.Points {
		if p.Status != OK {
			continue
		}
		a, b, err := synth.SeenAt(pl, lc, p.X, p.Y)
		if err != nil {
			t.Fatal(err)
		}
		T := toLeft(lc, pl.Position(a, b))
		d := math.Sqrt(sq(p.Pos[0]-T[0]) + sq(p.Pos[1]-T[1]) + sq(p.Pos[2]-T[2]))
		s += d * d
		worst = math.Max(worst, d)
		n++
	}
	return math.Sqrt(s / float64(max(n, 1))), worst, n
}

// inROI returns the number of grid points whose subset lies in figROI.
func inROI(ref *Reference) int {
	n := 0
	for _, p := range ref.Points {
		if p.Status != StereoMatch || p.Match != correlate.Outside {
			n++
		}
	}
	return n
}

package stereo

import (
	"context"
	"math"
	"sync"
	"testing"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/spline"
	"github.com/mottledic/mottle/pkg/synth"
)

// The figures' scene (invented): the bench of synth.BenchRig — two cameras
// 500 mm from the specimen, 25° between their axes, about 100 mm across
// the image — rendered exactly by pkg/synth at figW×figH px.
const figW, figH = 1024, 768

var (
	patOnce sync.Once
	pat     synth.Surface
)

// scaled is a pattern drawn in units of 0.1 mm.
type scaled struct{ p *synth.Pattern }

func (s scaled) Value(X, Y float64) float64 { return s.p.Value(10*X, 10*Y) }

// pattern returns the speckle pattern painted on the specimens: speckles
// of 0.45 mm (about 4.5 px).
func pattern(t testing.TB) synth.Surface {
	patOnce.Do(func() {
		p, err := synth.NewPattern(synth.PatternOptions{Diameter: 4.5, Seed: 11,
			Bounds: synth.Rect{X0: -750, Y0: -600, X1: 750, Y1: 600}})
		if err != nil {
			t.Fatal(err)
		}
		pat = scaled{p}
	})
	return pat
}

var (
	pairMu    sync.Mutex
	pairCache = map[string][2]*imageio.Gray{}
)

// cachedPair renders a named scene once per test binary.
func cachedPair(t testing.TB, name string, pl synth.Placement, seed int64) (l, r *imageio.Gray) {
	pairMu.Lock()
	defer pairMu.Unlock()
	if p, ok := pairCache[name]; ok {
		return p[0], p[1]
	}
	l, r = renderPair(t, pl, seed)
	pairCache[name] = [2]*imageio.Gray{l, r}
	return l, r
}

// renderPair renders a placed specimen in both cameras of the bench.
func renderPair(t testing.TB, pl synth.Placement, seed int64) (l, r *imageio.Gray) {
	t.Helper()
	lc, rc := synth.BenchRig(figW, figH)
	var out [2]*imageio.Gray
	for k, c := range []synth.Cam{lc, rc} {
		g, _, err := synth.RenderSurface(pattern(t), pl, c, synth.RenderOptions{W: figW, H: figH, Supersample: 2, Noise: 0.5, Seed: seed + int64(k)})
		if err != nil {
			t.Fatal(err)
		}
		out[k] = g
	}
	return out[0], out[1]
}

// figOptions are the subset settings of the figures: 31 px subsets on a
// 24 px grid, second-order shape function, quintic interpolation, and a
// Gaussian prefilter of σ = 0.7 px against interpolation bias (without it
// the tilted-stretch strain scatters 10× more, in bands that follow the
// sub-pixel part of the displacement: the bias of Schreier, Braasch &
// Sutton 2000, "Systematic errors in digital image correlation caused by
// intensity interpolation", Opt. Eng. 39:2915).
func figOptions() Options {
	return Options{Correlate: correlate.Options{Subset: 31, Step: 24, Interp: spline.Quintic, Prefilter: 0.7}}
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

// TestShapeFigures measures the shape of a plane facing the bench and of a
// cylinder (R = 60 mm, axis vertical) with the exact rig: RMS error at most
// 0.005 mm (the figure of the stereo issue), over the points measured.
func TestShapeFigures(t *testing.T) {
	_, _, rig := bench(figW, figH)
	for _, c := range []struct {
		name string
		pl   synth.Placement
	}{
		{"plane", synth.Placement{Shape: synth.Plane{}}},
		{"cylinder", synth.Placement{Shape: synth.Cylinder{R: 60}}},
	} {
		l, r := cachedPair(t, c.name, c.pl, 1)
		ref, err := Match(context.Background(), rig, l, r, figOptions())
		if err != nil {
			t.Fatal(err)
		}
		rms, worst, n := shapeError(t, ref, c.pl)
		t.Logf("%s: %d of %d points, shape RMS error %.5f mm, worst %.5f mm", c.name, n, len(ref.Points), rms, worst)
		if n < len(ref.Points)*8/10 {
			t.Errorf("%s: only %d of %d points measured", c.name, n, len(ref.Points))
		}
		if rms > 0.005 {
			t.Errorf("%s: shape RMS error %.5f mm: want at most 0.005 mm", c.name, rms)
		}
	}
}

package verify

import (
	"context"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
)

// idealTracker is a stand-in for a first-order subset method: on the star
// pair it returns the mean of the true v over the subset rows (the box
// filter of theory.go), on the static pair Gaussian noise of σ₀/N (the
// 1/√(N²) law of a least-squares estimate over N² pixels).
func idealTracker(set StarSet, sigma0 float64) Tracker {
	return func(ctx context.Context, ref, def *imageio.Gray, pts [][2]int, n int) ([]Disp, error) {
		rng := rand.New(rand.NewPCG(uint64(n), 7))
		out := make([]Disp, len(pts))
		h := n / 2
		for i, p := range pts {
			if ref != set.Ref {
				out[i] = Disp{U: rng.NormFloat64() * sigma0 / float64(n), V: rng.NormFloat64() * sigma0 / float64(n), OK: true}
				continue
			}
			per := set.Period(float64(p[0]))
			var s float64
			for k := -h; k <= h; k++ {
				s += set.Amplitude * math.Cos(2*math.Pi*float64(k)/per)
			}
			out[i] = Disp{V: s / float64(n), OK: true}
		}
		return out, nil
	}
}

// TestChallengeProtocolIdeal runs the challenge protocol (Reu et al. 2022,
// Exp. Mech. 62:639; star form and MEI definition from memory, see shared
// REFERENCES.md) on an ideal box-filter tracker, whose resolution has the
// closed form of theory.go (Dirichlet kernel) and whose noise is σ₀/N, so
// the protocol's crossing search and MEI can be checked exactly.
func TestChallengeProtocolIdeal(t *testing.T) {
	img := imageio.NewGray(1200, 120)
	st := imageio.NewGray(200, 200)
	set := StarSet{StaticRef: st, StaticDef: st, Ref: img, Def: img, Amplitude: 0.5, Y0: 60,
		Period: func(x float64) float64 { return 10 + 290*x/1199 }}
	rs, err := Challenge(context.Background(), set, idealTracker(set, 0.2), ChallengeOptions{})
	if err != nil {
		t.Fatal(err)
	}
	t.Log("\n" + ChallengeTable(rs))
	if len(rs) != 5 {
		t.Fatalf("%d results, want 5 default subsets", len(rs))
	}
	for i, r := range rs {
		// Exact box-filter data: the crossing must land on the theory within
		// the sampling of the row (Δp = 290·2/1199 ≈ 0.5 px).
		if math.Abs(r.Resolution-r.Theory) > 0.5 {
			t.Errorf("subset %d: resolution %.2f, theory %.2f", r.Subset, r.Resolution, r.Theory)
		}
		if i > 0 {
			if !(r.NoiseV < rs[i-1].NoiseV) || !(r.Resolution > rs[i-1].Resolution) {
				t.Errorf("subset %d: trends broken (noise %.4f after %.4f, resolution %.1f after %.1f)",
					r.Subset, r.NoiseV, rs[i-1].NoiseV, r.Resolution, rs[i-1].Resolution)
			}
		}
		// σ ∝ 1/N and p₁₀ ∝ N: MEI ≈ σ₀·3.99 for every subset.
		if math.Abs(r.MEI/(0.2*3.99)-1) > 0.3 {
			t.Errorf("subset %d: MEI %.3f, want ≈ %.3f", r.Subset, r.MEI, 0.2*3.99)
		}
	}
	png := filepath.Join(t.TempDir(), "ideal.png")
	if err := PlotChallenge(png, "ideal box filter", Series{"ideal", rs}); err != nil {
		t.Fatal(err)
	}
	if fi, err := os.Stat(png); err != nil || fi.Size() < 1000 {
		t.Fatalf("plot not written: %v", err)
	}
}

// crossing finds where the attenuation first falls below the level, by
// linear interpolation between the bracketing periods (values worked by
// hand in the table).
func TestCrossing(t *testing.T) {
	p := []float64{10, 20, 30, 40, 50}
	for _, tc := range []struct {
		a    []float64
		want float64
		hold int
	}{
		{[]float64{0.1, 0.5, 0.8, 0.95, 1}, 40 - 10*(0.95-0.9)/(0.95-0.8), 1},
		{[]float64{0.1, 0.5, 0.9, 0.95, 1}, 30, 1}, // a = level is not below it
		{[]float64{0.95, 0.96, 0.97, 0.98, 0.99}, math.NaN(), 1},
		{[]float64{0.1, 0.2, 0.3, 0.4, 0.5}, math.NaN(), 1},
		// An isolated dip counts with hold 1 and is skipped with hold 2.
		{[]float64{0.1, 0.5, 0.95, 0.85, 1}, 50 - 10*(1-0.9)/(1-0.85), 1},
		{[]float64{0.1, 0.5, 0.95, 0.85, 1}, 30 - 10*(0.95-0.9)/(0.95-0.5), 2},
	} {
		got, note := crossing(p, tc.a, 0.9, tc.hold)
		if math.IsNaN(tc.want) != math.IsNaN(got) || (!math.IsNaN(got) && math.Abs(got-tc.want) > 1e-9) {
			t.Errorf("crossing(%v) = %v (%s), want %v", tc.a, got, note, tc.want)
		}
		if math.IsNaN(got) && note == "" {
			t.Errorf("crossing(%v): NaN without a note", tc.a)
		}
	}
}

func TestChallengeOptionsValidate(t *testing.T) {
	if err := (ChallengeOptions{}).Validate(); err != nil {
		t.Fatalf("defaults invalid: %v", err)
	}
	err := ChallengeOptions{Subsets: []int{10}, Smooth: 4, Level: 1.2, Order: 3, Step: -1}.Validate()
	if err == nil {
		t.Fatal("bad options accepted")
	}
	for _, w := range []string{"subset 10", "smooth 4", "level 1.2", "order 3", "step -1"} {
		if !strings.Contains(err.Error(), w) {
			t.Errorf("error %q does not mention %q", err, w)
		}
	}
}

package correlate

import (
	"math/rand/v2"
	"slices"
	"testing"
)

// median selects the middle value(s) instead of sorting; it must return
// the same bits as the median of the sorted values (common practice: the
// middle element, or the mean of the two middle ones), for odd and even
// lengths, many ties, and sorted, reversed and constant input.
func TestMedianIsSortedMedian(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	gens := map[string]func(i, n int) float64{
		"uniform":  func(i, n int) float64 { return rng.Float64() },
		"ties":     func(i, n int) float64 { return float64(rng.IntN(5)) },
		"sorted":   func(i, n int) float64 { return float64(i) * 0.1 },
		"reversed": func(i, n int) float64 { return float64(n-i) * 0.1 },
		"constant": func(i, n int) float64 { return 2.5 },
		"organ":    func(i, n int) float64 { return float64(min(i, n-i)) },
	}
	for name, g := range gens {
		for _, n := range []int{1, 2, 3, 4, 5, 10, 31, 64, 200, 1001, 4096} {
			v := make([]float64, n)
			for i := range v {
				v[i] = g(i, n)
			}
			s := slices.Clone(v)
			slices.Sort(s)
			want := s[n/2]
			if n%2 == 0 {
				want = (s[n/2-1] + s[n/2]) / 2
			}
			if got := median(v); got != want {
				t.Errorf("%s, n = %d: median %v, want %v", name, n, got, want)
			}
		}
	}
}

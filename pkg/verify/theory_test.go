package verify

import (
	"encoding/csv"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// The first-order attenuation must equal the Dirichlet-kernel closed form
// derived in theory.go; its large-N limit is the box-filter sinc.
func TestAttenuationClosedForm(t *testing.T) {
	for _, n := range []int{5, 11, 31, 51} {
		for _, p := range []float64{7.3, 20, 44, 150, 1000} {
			got, err := Attenuation(n, 1, p)
			if err != nil {
				t.Fatal(err)
			}
			want := math.Sin(math.Pi*float64(n)/p) / (float64(n) * math.Sin(math.Pi/p))
			if math.Abs(got-want) > 1e-9 {
				t.Errorf("n=%d p=%g: least squares %v, Dirichlet kernel %v", n, p, got, want)
			}
		}
	}
}

func TestTheoryPeriod(t *testing.T) {
	// sin w / w = 0.9 at w = 0.786683 (scipy.optimize.brentq, SciPy 1.10
	// via /usr/bin/python3, gives 0.78668307), so p₁₀ → πN/0.786683 =
	// 3.99347·N as N grows (large-N limit of the Dirichlet kernel).
	const ratio = math.Pi / 0.786683
	for _, tc := range []struct {
		n      int
		lo, hi float64 // band on p₁₀/N
	}{
		{11, 3.97, 3.99}, {21, 3.98, 3.995}, {51, 3.99, 3.995}, {501, ratio - 1e-3, ratio + 1e-4},
	} {
		p, err := TheoryPeriod(tc.n, 1, 0.9)
		if err != nil {
			t.Fatal(err)
		}
		if r := p / float64(tc.n); r < tc.lo || r > tc.hi {
			t.Errorf("first order n=%d: p10/N = %.5f, want in [%g, %g]", tc.n, r, tc.lo, tc.hi)
		}
		if a, _ := Attenuation(tc.n, 1, p); math.Abs(a-0.9) > 1e-6 {
			t.Errorf("n=%d: attenuation at p10 = %v", tc.n, a)
		}
		// A second-order fit follows the crest: finer resolution.
		p2, err := TheoryPeriod(tc.n, 2, 0.9)
		if err != nil {
			t.Fatal(err)
		}
		if !(p2 < 0.75*p) {
			t.Errorf("n=%d: second-order p10 %.1f not clearly below first-order %.1f", tc.n, p2, p)
		}
	}
}

func TestAttenuationErrors(t *testing.T) {
	for _, tc := range []struct {
		n, order int
		p        float64
	}{{4, 1, 10}, {1, 1, 10}, {11, 3, 10}, {11, 1, 0}, {11, 1, math.NaN()}} {
		if _, err := Attenuation(tc.n, tc.order, tc.p); err == nil {
			t.Errorf("Attenuation(%d, %d, %v): no error", tc.n, tc.order, tc.p)
		}
	}
	if _, err := TheoryPeriod(11, 1, 1.5); err == nil {
		t.Error("TheoryPeriod level 1.5: no error")
	}
}

// TestTheoryPeriodTable checks TheoryPeriod against the protocol's expected
// table in testdata/protocol/resolution_p10.csv: the same p₁₀ computed
// independently with NumPy's least squares and SciPy's brentq
// (scripts/ref_resolution.py, Debian's python3-numpy and -scipy), for
// first- and second-order subsets of 11–101 px.
func TestTheoryPeriodTable(t *testing.T) {
	f, err := os.Open(filepath.Join("..", "..", "testdata", "protocol", "resolution_p10.csv"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	r := csv.NewReader(f)
	r.Comment = '#'
	rows, err := r.ReadAll()
	if err != nil {
		t.Fatalf("resolution_p10.csv: %v", err)
	}
	if len(rows) < 2 || strings.Join(rows[0], ",") != "subset_px,order,p10_px" {
		t.Fatalf("resolution_p10.csv: header %v", rows[:1])
	}
	for _, row := range rows[1:] {
		n, err1 := strconv.Atoi(row[0])
		order, err2 := strconv.Atoi(row[1])
		want, err3 := strconv.ParseFloat(row[2], 64)
		if err := errors.Join(err1, err2, err3); err != nil {
			t.Fatalf("resolution_p10.csv row %v: %v", row, err)
		}
		got, err := TheoryPeriod(n, order, 0.9)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(got-want) > 1e-6*want {
			t.Errorf("subset %d, order %d: p₁₀ %.8g px, NumPy/SciPy %.8g px", n, order, got, want)
		}
	}
	if len(rows) != 13 {
		t.Errorf("resolution_p10.csv has %d rows, want 12 and the header", len(rows))
	}
}

package verify

import (
	"context"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/synth"
)

func TestLattice(t *testing.T) {
	for _, tc := range []struct {
		pts  [][2]int
		step int
		ok   bool
	}{
		{[][2]int{{10, 10}}, 1, true},
		{[][2]int{{10, 10}, {14, 10}, {10, 14}, {14, 14}}, 4, true},
		{[][2]int{{10, 20}, {16, 20}, {22, 20}}, 6, true},
		{[][2]int{{10, 10}, {14, 10}, {10, 14}}, 0, false}, // a node missing
		{[][2]int{{10, 10}, {13, 10}, {17, 10}}, 0, false}, // uneven
	} {
		_, _, _, _, step, err := lattice(tc.pts)
		if (err == nil) != tc.ok || (tc.ok && step != tc.step) {
			t.Errorf("lattice(%v) = step %d, %v; want step %d ok %v", tc.pts, step, err, tc.step, tc.ok)
		}
	}
}

// MottleResponse reads PNG files and answers in the drivers' format; on a
// rendered translation it must be close to the truth.
func TestMottleResponse(t *testing.T) {
	c := BenchCase{Name: "t", Motion: synth.Translation{U: 1.3, V: -0.6}, Size: 96, Subset: 21, Step: 16, Seed: 5}
	ref, def, err := c.Files(t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	pts, truth := c.Points()
	resp, err := MottleResponse(context.Background(), Request{Reference: ref, Deformed: def, Subset: c.Subset, Points: pts}, correlate.Options{Threads: 1})
	if err != nil {
		t.Fatal(err)
	}
	row, err := RowFrom(c, "Mottle", resp, truth)
	if err != nil {
		t.Fatal(err)
	}
	// 8-bit quantisation alone limits a noise-free subset of 21 px to
	// about 0.01 px (common practice); 0.03 px leaves room.
	if row.Points != len(pts) || row.Err.Failed != 0 || !(row.Err.RMS < 0.03) || !(resp.Seconds > 0) {
		t.Errorf("Mottle on a 1.3, −0.6 px translation: %+v (%.3g s)", row.Err, resp.Seconds)
	}
	if _, err := MottleResponse(context.Background(), Request{Reference: ref + ".missing", Deformed: def, Subset: 21, Points: pts}, correlate.Options{}); err == nil {
		t.Error("missing image accepted")
	}
}

func TestBenchTableAndRatio(t *testing.T) {
	a := BenchCase{Name: "a", Size: 10, Subset: 21}
	b := BenchCase{Name: "b", Size: 10, Subset: 21}
	rows := []BenchRow{
		{Case: a, Method: "Mottle IC-GN (1 thread)", Points: 100, Seconds: 0.1, CPU: 0.1, Wall: time.Second},
		{Case: a, Method: "Mottle IC-GN (2 threads)", Points: 100, Seconds: 0.05, CPU: 0.1},
		{Case: a, Method: ECCLabel, Points: 100, Seconds: 1, CPU: 2},
		{Case: a, Method: ECC2Label, Points: 100, Seconds: 0.8, CPU: 2},
		{Case: a, Method: ECCTightLabel, Points: 100, Seconds: 10},
		{Case: b, Method: "Mottle IC-GN (1 thread)", Points: 100, Seconds: 0.1, CPU: 0.1},
		{Case: b, Method: ECCLabel, Points: 100, Seconds: 0.4, CPU: 0.4},
	}
	// Ratios 10 and 4 in points/s (geometric mean √40), 20 and 4 per CPU
	// second (√80).
	w, c := SpeedRatio(rows, "Mottle IC-GN (1 thread)")
	if math.Abs(w-math.Sqrt(40)) > 1e-9 || math.Abs(c-math.Sqrt(80)) > 1e-9 {
		t.Errorf("SpeedRatio = %v, %v, want %v, %v", w, c, math.Sqrt(40), math.Sqrt(80))
	}
	// All cores are compared with ECC on all cores: 2000/125 = 16.
	if w, _ := SpeedRatio(rows, "Mottle IC-GN (2 threads)"); math.Abs(w-16) > 1e-9 {
		t.Errorf("SpeedRatio, all cores = %v, want 16", w)
	}
	if w, _ := SpeedRatio(rows, "nobody"); !math.IsNaN(w) {
		t.Errorf("SpeedRatio of no rows = %v, want NaN", w)
	}
	tab := BenchTable(rows)
	for _, w := range []string{"| a | 21 | 100 | Mottle IC-GN (1 thread) | 1000 | 1000 | 10.0×; 20.0× |",
		"| a | 21 | 100 | Mottle IC-GN (2 threads) | 2000 | 1000 | 16.0×; 20.0× |",
		"| b | 21 | 100 | Mottle IC-GN (1 thread) | 1000 | 1000 | 4.0×; 4.0× |", ECCTightLabel + " | 10 | NaN | – |"} {
		if !strings.Contains(tab, w) {
			t.Errorf("table lacks %q:\n%s", w, tab)
		}
	}
}

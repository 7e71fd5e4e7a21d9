package field_test

import (
	"fmt"
	"math"
	"os"

	"github.com/mottledic/mottle/pkg/field"
)

// Build a small field, summarise a quantity and write the results folder.
func Example() {
	f := field.New(3, 2, 20, 20, 10, 31) // 3×2 points from (20, 20), step 10 px
	u := []float64{0.10, 0.12, 0.14, 0.11, math.NaN(), 0.15}
	if err := f.Set("u", field.DefaultUnit("u", "px"), u); err != nil {
		fmt.Println(err)
		return
	}
	f.Status[4] = "low_zncc"
	s, _ := f.Summary("u")
	fmt.Printf("u: %d valid, mean %.3f %s, range %.2f to %.2f\n", s.Count, s.Mean, f.Units["u"], s.Min, s.Max)

	dir, _ := os.MkdirTemp("", "mottle-example")
	defer os.RemoveAll(dir)
	paths, err := field.WriteDir(dir, f)
	fmt.Println(len(paths), "files,", err)
	// Output:
	// u: 5 valid, mean 0.124 px, range 0.10 to 0.15
	// 7 files, <nil>
}

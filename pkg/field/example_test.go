package field_test

import (
	"fmt"
	"math"
	"os"

	"github.com/mottledic/mottle/pkg/field"
)

// Build a small field, summarise a quantity and write it as CSV (a results
// folder is written by pkg/results).
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

	if err := field.WriteCSV(os.Stdout, f); err != nil {
		fmt.Println(err)
	}
	// Output:
	// u: 5 valid, mean 0.124 px, range 0.10 to 0.15
	// i,j,x,y,status,u
	// 0,0,20,20,ok,0.1
	// 1,0,30,20,ok,0.12
	// 2,0,40,20,ok,0.14
	// 0,1,20,30,ok,0.11
	// 1,1,30,30,low_zncc,
	// 2,1,40,30,ok,0.15
}

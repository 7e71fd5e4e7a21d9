// Package figures holds the accuracy figures that README.md publishes, each
// with the bound its test asserts, so that the README, the tests and the
// bounds cannot drift apart.
//
// A test measures a figure and calls Check with the figure's name; Check
// fails the test when the measurement exceeds the bound. A test of this
// package reads README.md and checks that every figure is quoted in its row
// with its value and its bound, and that the row quotes no other decimal
// number. Values are the measurements when the bound was set (mean and
// worst over several pattern seeds); bounds are about 1.5 times the
// measured value for errors, or the published limit itself for a "≤ X"
// claim.
//
// When an engine change moves a figure, run the guarding test with -v:
// Check logs every measurement beside its quoted value and bound. Update
// Value (and README.md) when the figure changed; loosen a bound only with a
// reason in the commit.
package figures

import (
	"strconv"
	"strings"
	"testing"
)

// Figure is one published accuracy figure.
type Figure struct {
	// Name identifies the figure in tests, e.g. "homogeneous/first/rms/mean".
	Name string
	// Row is the start of README's "check" cell of the row that quotes it.
	Row string
	// Value is the measurement quoted in README.md.
	Value float64
	// Max is the largest value the test accepts.
	Max float64
	// Min, if not zero, is the smallest value the test accepts: for a
	// ratio to a prediction, or an error that a closed form predicts, a
	// result far below it means the test no longer measures what it says.
	Min float64
}

// Text renders v as README.md writes it: the shortest decimal form, with
// exponents written without a leading zero (4.4e-5, not 4.4e-05).
func Text(v float64) string {
	s := strconv.FormatFloat(v, 'g', -1, 64)
	s = strings.Replace(s, "e-0", "e-", 1)
	s = strings.Replace(s, "e+0", "e+", 1)
	return s
}

// Lookup returns the figure of that name.
func Lookup(name string) (Figure, bool) {
	for _, f := range All() {
		if f.Name == name {
			return f, true
		}
	}
	return Figure{}, false
}

// Check asserts a measured figure against its bound and logs it beside the
// quoted value. An unknown name stops the test.
func Check(t testing.TB, name string, got float64) {
	t.Helper()
	f, ok := Lookup(name)
	if !ok {
		t.Fatalf("figure %q is not in internal/figures", name)
	}
	want := "≤ " + Text(f.Max)
	if f.Min != 0 {
		want = "in [" + Text(f.Min) + ", " + Text(f.Max) + "]"
	}
	if !(got <= f.Max && got >= f.Min) {
		t.Errorf("%s: measured %.3g, want %s (README quotes %s)", name, got, want, Text(f.Value))
		return
	}
	t.Logf("%s: measured %.3g, README %s, bound %s", name, got, Text(f.Value), want)
}

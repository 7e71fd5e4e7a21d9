package figures

import (
	"os"
	"regexp"
	"slices"
	"strings"
	"testing"
)

// context lists, per README row, decimal numbers of its result cell that
// describe the check rather than quote a figure.
func context() map[string][]string {
	return map[string][]string{
		rowSweep:     {"0.5", "0.8", "0.3"},
		rowTensile:   {"0.2"},
		rowCross:     {"1.2"},
		rowChallenge: {"3.99"},
	}
}

// row is one line of README's accuracy table.
type row struct {
	check, result, bound string
}

// readmeTable returns the rows of the first table in README.md's
// "Accuracy and performance" section.
func readmeTable(t *testing.T) []row {
	b, err := os.ReadFile("../../README.md")
	if err != nil {
		t.Fatal(err)
	}
	s := string(b)
	i := strings.Index(s, "\n## Accuracy and performance\n")
	if i < 0 {
		t.Fatal(`README.md has no "## Accuracy and performance" section`)
	}
	s = s[i+1:]
	if j := strings.Index(s[3:], "\n## "); j >= 0 {
		s = s[:j+3]
	}
	var rows []row
	inTable := false
	for _, ln := range strings.Split(s, "\n") {
		if !strings.HasPrefix(ln, "|") {
			if inTable {
				break
			}
			continue
		}
		if !inTable {
			inTable = true
			if !strings.Contains(ln, "test bound") {
				t.Fatalf("accuracy table header %q has no \"test bound\" column", ln)
			}
			continue
		}
		if strings.HasPrefix(ln, "|---") {
			continue
		}
		cells := strings.Split(strings.Trim(ln, "| "), " | ")
		if len(cells) != 4 {
			t.Fatalf("accuracy table row %q: %d cells, want 4 (check, result, test bound, source)", ln, len(cells))
		}
		rows = append(rows, row{cells[0], cells[1], cells[2]})
	}
	if len(rows) == 0 {
		t.Fatal("README.md: accuracy table not found")
	}
	return rows
}

// numbers returns the numbers of s, unsigned, as written.
func numbers(s string) []string {
	return regexp.MustCompile(`\d+(?:\.\d+)?(?:e[-+]?\d+)?`).FindAllString(s, -1)
}

// decimal reports whether a number has a decimal point or an exponent:
// integers in a result cell count things (seeds, points, frames).
func decimal(n string) bool { return strings.ContainsAny(n, ".e") }

// README's accuracy table quotes each figure of All with its value and its
// bound, in the row named by the figure; its result cells quote no decimal
// number and its bound cells no number at all that is not one of them; and
// every row is guarded by at least one figure.
func TestReadmeAgrees(t *testing.T) {
	rows := readmeTable(t)
	names := map[string]bool{}
	byRow := map[int][]Figure{}
	for _, f := range All() {
		if names[f.Name] {
			t.Errorf("figure %q listed twice", f.Name)
		}
		names[f.Name] = true
		if !(f.Max > 0 && f.Min < f.Max && f.Min >= 0) {
			t.Errorf("figure %q: bounds [%v, %v] make no sense", f.Name, f.Min, f.Max)
		}
		if f.Value > f.Max || f.Value < f.Min {
			t.Errorf("figure %q: quoted value %v outside its own bounds [%v, %v]", f.Name, f.Value, f.Min, f.Max)
		}
		if f.Row == "" {
			continue
		}
		var hit []int
		for i, r := range rows {
			if strings.HasPrefix(r.check, f.Row) {
				hit = append(hit, i)
			}
		}
		if len(hit) != 1 {
			t.Errorf("figure %q: %d README rows start with %q, want 1", f.Name, len(hit), f.Row)
			continue
		}
		byRow[hit[0]] = append(byRow[hit[0]], f)
	}
	for i, r := range rows {
		fs := byRow[i]
		if len(fs) == 0 {
			t.Errorf("README row %q: no figure in internal/figures guards it", r.check)
			continue
		}
		res, bnd := numbers(r.result), numbers(r.bound)
		var values, bounds []string
		for _, f := range fs {
			values = append(values, Text(f.Value))
			bounds = append(bounds, Text(f.Max))
			if f.Min != 0 {
				bounds = append(bounds, Text(f.Min))
			}
			if !slices.Contains(res, Text(f.Value)) {
				t.Errorf("README row %q: result %q does not quote %s = %s", r.check, r.result, f.Name, Text(f.Value))
			}
			if !slices.Contains(bnd, Text(f.Max)) || f.Min != 0 && !slices.Contains(bnd, Text(f.Min)) {
				t.Errorf("README row %q: bound %q does not quote the bounds of %s (max %s, min %s)", r.check, r.bound, f.Name, Text(f.Max), Text(f.Min))
			}
		}
		for _, n := range res {
			if decimal(n) && !slices.Contains(values, n) && !slices.Contains(context()[rowKey(r.check)], n) {
				t.Errorf("README row %q: result quotes %s, which no figure of internal/figures holds", r.check, n)
			}
		}
		for _, n := range bnd {
			if !slices.Contains(bounds, n) {
				t.Errorf("README row %q: bound cell quotes %s, which is no figure's bound", r.check, n)
			}
		}
	}
}

// rowKey returns the Row constant a check cell starts with.
func rowKey(check string) string {
	for k := range context() {
		if strings.HasPrefix(check, k) {
			return k
		}
	}
	return ""
}

// Text writes numbers the way README does.
func TestText(t *testing.T) {
	for v, want := range map[float64]string{4.4e-5: "4.4e-5", 0.00034: "0.00034", 1.07: "1.07", 0.0070: "0.007", 2e-12: "2e-12"} {
		if got := Text(v); got != want {
			t.Errorf("Text(%v) = %q, want %q", v, got, want)
		}
	}
}

package series

import (
	"strconv"
	"strings"
)

// LiveCSVHeader returns the header of the per-frame live CSV lines: index,
// name, time_s, load_N, trusted, then for each reading its value and
// predicted std (ext_<name>_eng, gauge_<name>_<component>, each with a
// _std column), and reasons ("name component: reason; …" of the readings
// not trusted).
func LiveCSVHeader(p Params) []string {
	h := []string{"index", "name", "time_s", "load_N", "trusted"}
	for _, e := range p.Extensometers {
		h = append(h, "ext_"+e.Name+"_eng", "ext_"+e.Name+"_eng_std")
	}
	for _, g := range p.Gauges {
		for _, c := range g.components() {
			h = append(h, "gauge_"+g.Name+"_"+c, "gauge_"+g.Name+"_"+c+"_std")
		}
	}
	return append(h, "reasons")
}

// CSVRecord returns v as one line of the live CSV (LiveCSVHeader); a value
// that is not trusted is an empty cell, its reason in the last column.
func (v LiveValues) CSVRecord() []string {
	f := func(x *float64) string {
		if x == nil || !finite(*x) {
			return ""
		}
		return strconv.FormatFloat(*x, 'g', -1, 64)
	}
	rec := []string{strconv.Itoa(v.Index), v.Name, f(v.Time), f(v.Load), strconv.FormatBool(v.Trusted)}
	var why []string
	for _, r := range v.Readings {
		rec = append(rec, f(r.Value), f(r.Std))
		if !r.Trusted {
			why = append(why, r.Name+" "+r.Component+": "+r.Reason)
		}
	}
	return append(rec, strings.Join(why, "; "))
}

package series

import (
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"path/filepath"
	"regexp"
	"sort"
	"strconv"
	"strings"
)

// Table is a CSV of per-frame data: a key column (frame index, frame name,
// or time) and optional time and load columns. It supplies time stamps and
// loads to frames.
//
// Recognised headers (case-insensitive):
//
//	key:  "frame" or "index" (0 = reference), "name" or "file", or "time",
//	      "time_s", "t" (seconds; then loads are interpolated in time)
//	time: "time", "time_s", "t" (seconds), "time_ms" (milliseconds)
//	load: "load", "force", "load_n", "force_n" (newtons),
//	      "load_kn", "force_kn" (kilonewtons)
//
// Empty cells mean "not known".
type Table struct {
	// By is "frame", "name" or "time".
	By    string
	index map[int]int
	names map[string]int
	times []float64 // per row, NaN if missing
	loads []float64 // per row, NaN if missing
	order []int     // rows sorted by time (By == "time")
}

// ReadTable parses a per-frame CSV (see Table). what names the source in
// errors, e.g. the file name.
func ReadTable(r io.Reader, what string) (*Table, error) {
	cr := csv.NewReader(r)
	cr.FieldsPerRecord = -1
	cr.TrimLeadingSpace = true
	cr.Comment = '#'
	recs, err := cr.ReadAll()
	if err != nil {
		return nil, fmt.Errorf("%s: %w", what, err)
	}
	if len(recs) < 2 {
		return nil, fmt.Errorf("%s: need a header row and at least one data row", what)
	}
	keyCol, timeCol, loadCol := -1, -1, -1
	by := ""
	timeScale, loadScale := 1.0, 1.0
	for i, h := range recs[0] {
		h = strings.ToLower(strings.TrimSpace(strings.TrimPrefix(h, "\ufeff")))
		switch h {
		case "frame", "index":
			if keyCol < 0 || by == "time" {
				keyCol, by = i, "frame"
			}
		case "name", "file", "filename":
			if keyCol < 0 || by == "time" {
				keyCol, by = i, "name"
			}
		case "time", "time_s", "t", "time_ms":
			if timeCol < 0 {
				timeCol = i
				if h == "time_ms" {
					timeScale = 1e-3
				}
			}
			if keyCol < 0 {
				keyCol, by = i, "time"
			}
		case "load", "force", "load_n", "force_n", "load_kn", "force_kn":
			if loadCol < 0 {
				loadCol = i
				if strings.HasSuffix(h, "_kn") {
					loadScale = 1e3
				}
			}
		}
	}
	if keyCol < 0 {
		return nil, fmt.Errorf("%s: header %q has no key column; name one column frame, name or time", what, recs[0])
	}
	if timeCol < 0 && loadCol < 0 {
		return nil, fmt.Errorf("%s: header %q has neither a time nor a load column (time_s, load_N, force_kN, …)", what, recs[0])
	}
	t := &Table{By: by, index: map[int]int{}, names: map[string]int{}}
	num := func(rec []string, col int, line int, scale float64) (float64, error) {
		if col < 0 || col >= len(rec) || strings.TrimSpace(rec[col]) == "" {
			return math.NaN(), nil
		}
		v, err := strconv.ParseFloat(strings.TrimSpace(rec[col]), 64)
		if err != nil || math.IsInf(v, 0) || math.IsNaN(v) {
			return 0, fmt.Errorf("%s line %d column %q: %q is not a number", what, line, recs[0][col], rec[col])
		}
		return v * scale, nil
	}
	var errs []error
	for li, rec := range recs[1:] {
		line := li + 2
		if len(rec) == 1 && strings.TrimSpace(rec[0]) == "" {
			continue
		}
		tv, err1 := num(rec, timeCol, line, timeScale)
		lv, err2 := num(rec, loadCol, line, loadScale)
		if err := errors.Join(err1, err2); err != nil {
			errs = append(errs, err)
			continue
		}
		row := len(t.times)
		switch by {
		case "frame":
			k, err := strconv.Atoi(strings.TrimSpace(rec[keyCol]))
			if err != nil || k < 0 {
				errs = append(errs, fmt.Errorf("%s line %d: frame %q is not a non-negative integer", what, line, rec[keyCol]))
				continue
			}
			if _, dup := t.index[k]; dup {
				errs = append(errs, fmt.Errorf("%s line %d: frame %d listed twice", what, line, k))
				continue
			}
			t.index[k] = row
		case "name":
			n := filepath.Base(strings.TrimSpace(rec[keyCol]))
			if _, dup := t.names[n]; dup {
				errs = append(errs, fmt.Errorf("%s line %d: name %q listed twice", what, line, n))
				continue
			}
			t.names[n] = row
		case "time":
			if math.IsNaN(tv) {
				errs = append(errs, fmt.Errorf("%s line %d: the time is empty", what, line))
				continue
			}
		}
		t.times = append(t.times, tv)
		t.loads = append(t.loads, lv)
		if len(errs) > 20 {
			break
		}
	}
	if err := errors.Join(errs...); err != nil {
		return nil, err
	}
	if len(t.times) == 0 {
		return nil, fmt.Errorf("%s: no data rows", what)
	}
	if by == "time" {
		t.order = make([]int, len(t.times))
		for i := range t.order {
			t.order[i] = i
		}
		sort.SliceStable(t.order, func(a, b int) bool { return t.times[t.order[a]] < t.times[t.order[b]] })
		for i := 1; i < len(t.order); i++ {
			if t.times[t.order[i]] == t.times[t.order[i-1]] {
				return nil, fmt.Errorf("%s: time %g s appears twice", what, t.times[t.order[i]])
			}
		}
	}
	return t, nil
}

// Lookup returns the time stamp and load the table gives frame index
// (0 = reference) with the given name (base name of the file) and, for a
// time-keyed table, time stamp at. A nil result means "not in the table".
// A time outside a time-keyed table's range is an error: loads are
// interpolated linearly, never extrapolated.
func (t *Table) Lookup(index int, name string, at *float64) (tm, load *float64, err error) {
	row := -1
	switch t.By {
	case "frame":
		if r, ok := t.index[index]; ok {
			row = r
		}
	case "name":
		if r, ok := t.names[filepath.Base(name)]; ok {
			row = r
		}
	case "time":
		if at == nil {
			return nil, nil, fmt.Errorf("frame %d %q: the load table is keyed by time but the frame has no time stamp", index, name)
		}
		x := *at
		o := t.order
		lo, hi := t.times[o[0]], t.times[o[len(o)-1]]
		if x < lo || x > hi {
			return nil, nil, fmt.Errorf("frame %d %q: time %g s is outside the load table's %g–%g s", index, name, x, lo, hi)
		}
		i := sort.Search(len(o), func(i int) bool { return t.times[o[i]] >= x })
		var l float64
		if t.times[o[i]] == x || i == 0 {
			l = t.loads[o[i]]
		} else {
			a, b := o[i-1], o[i]
			w := (x - t.times[a]) / (t.times[b] - t.times[a])
			l = t.loads[a] + w*(t.loads[b]-t.loads[a])
		}
		if finite(l) {
			load = &l
		}
		return nil, load, nil
	}
	if row < 0 {
		return nil, nil, nil
	}
	if v := t.times[row]; finite(v) {
		tm = &v
	}
	if v := t.loads[row]; finite(v) {
		load = &v
	}
	return tm, load, nil
}

// TimesFromNames extracts a time stamp from each name with pattern, a
// regular expression whose first capture group is a number; scale
// converts it to seconds (1 for seconds, 1e-3 for milliseconds; for a
// frame counter, 1/fps). Every name must match.
func TimesFromNames(names []string, pattern string, scale float64) ([]float64, error) {
	re, err := regexp.Compile(pattern)
	if err != nil {
		return nil, fmt.Errorf("time pattern %q: %w", pattern, err)
	}
	if re.NumSubexp() < 1 {
		return nil, fmt.Errorf("time pattern %q: needs a capture group around the number, e.g. _t([0-9.]+)s", pattern)
	}
	if !(scale > 0) || math.IsInf(scale, 0) {
		return nil, fmt.Errorf("time scale %g: use a positive factor to seconds", scale)
	}
	out := make([]float64, len(names))
	for i, n := range names {
		m := re.FindStringSubmatch(filepath.Base(n))
		if m == nil {
			return nil, fmt.Errorf("name %q does not match the time pattern %q", n, pattern)
		}
		v, err := strconv.ParseFloat(m[1], 64)
		if err != nil {
			return nil, fmt.Errorf("name %q: %q is not a number", n, m[1])
		}
		out[i] = v * scale
	}
	return out, nil
}

// CheckTimes returns an error naming the first frame whose time does not
// increase.
func CheckTimes(names []string, times []float64) error {
	for i := 1; i < len(times); i++ {
		if !(times[i] > times[i-1]) {
			return fmt.Errorf("frame %q at %g s is not after %q at %g s; time stamps must increase (sort the frames or fix the times)", names[i], times[i], names[i-1], times[i-1])
		}
	}
	return nil
}

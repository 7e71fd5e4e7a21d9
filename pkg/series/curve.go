package series

import (
	"encoding/csv"
	"fmt"
	"io"
	"math"
	"sort"
	"strconv"
)

// Curve is the series so far: one row per frame, the reference first, with
// the parameters and the noise floor it was made with.
type Curve struct {
	Rows   []Summary   `json:"rows"`
	Params Params      `json:"params"`
	Noise  *NoiseFloor `json:"noise_floor,omitempty"`
}

// QStat is the spatial mean and standard deviation of one quantity over
// the valid points of one frame, and how many points there were.
type QStat struct {
	Mean float64 `json:"mean"`
	Std  float64 `json:"std"`
	N    int     `json:"n"`
}

// NoiseFloor is the measurement noise estimated from static frames, taken
// without load or motion: for each quantity, the spatial standard
// deviation over the region of interest, combined over the static frames as
// a root mean square, and the mean (the bias, which should be near zero
// apart from rigid motion). This follows the stationary-image approach of
// the iDICs "Good Practices Guide for Digital Image Correlation" (Jones &
// Iadicola, eds., 2018).
type NoiseFloor struct {
	Frames int                `json:"frames"`
	Std    map[string]float64 `json:"std"`
	Mean   map[string]float64 `json:"mean"`
}

// noiseNames are the quantities the noise floor is reported for (those a
// frame has: a stereo series has w and no eps).
var noiseNames = []string{"u", "v", "w", "E11", "E22", "E12", "eps11", "eps22", "eps12"}

// StaticStats returns the spatial statistics of one static frame from its
// quantities by name (NaN where invalid), for NoiseFromFrames; a series
// engine of its own (pkg/series3d) keeps them per static frame.
func StaticStats(q map[string][]float64) map[string]QStat { return staticStats(q) }

// staticStats returns the spatial statistics of one static frame.
func staticStats(q map[string][]float64) map[string]QStat {
	out := map[string]QStat{}
	for _, name := range noiseNames {
		vals := q[name]
		ok := make([]bool, len(vals))
		for k := range vals {
			ok[k] = finite(vals[k])
		}
		m, s, _, _, n := Stats(vals, ok)
		out[name] = QStat{Mean: m, Std: s, N: n}
	}
	return out
}

// NoiseFromFrames combines per-frame statistics into a noise floor.
func NoiseFromFrames(frames []map[string]QStat) *NoiseFloor {
	if len(frames) == 0 {
		return nil
	}
	nf := &NoiseFloor{Frames: len(frames), Std: map[string]float64{}, Mean: map[string]float64{}}
	for _, name := range noiseNames {
		var ss, m float64
		c := 0
		for _, f := range frames {
			s, ok := f[name]
			if !ok || s.N == 0 {
				continue
			}
			ss += s.Std * s.Std
			m += s.Mean
			c++
		}
		if c > 0 {
			nf.Std[name] = math.Sqrt(ss / float64(c))
			nf.Mean[name] = m / float64(c)
		}
	}
	return nf
}

// NoiseFromQuantities returns the noise floor of one static pair analysed
// on its own (quantities by name, NaN where invalid).
func NoiseFromQuantities(q map[string][]float64) *NoiseFloor {
	return NoiseFromFrames([]map[string]QStat{staticStats(q)})
}

// NoiseFloor returns the noise floor from the static frames so far, or nil
// when there are none.
func (t *Tracker) NoiseFloor() *NoiseFloor { return NoiseFromFrames(t.st.Static) }

// Column returns the values of a named curve column for every row (NaN
// where missing): "time_s", "load_N", "stress_MPa", "mean_<q>",
// "ext_<name>_eng", "ext_<name>_eng_std", "ext_<name>_true",
// "ext_<name>_stretch",
// "gauge_<name>_<component>_mean" or "_std".
func (c Curve) Column(name string) []float64 {
	out := make([]float64, len(c.Rows))
	cols := c.columns()
	for i, r := range c.Rows {
		out[i] = math.NaN()
		for _, col := range cols {
			if col.name == name {
				out[i] = col.get(r)
				break
			}
		}
	}
	return out
}

type column struct {
	name string
	get  func(Summary) float64
}

func ptr(p *float64) float64 {
	if p == nil {
		return math.NaN()
	}
	return *p
}

// columns lists the numeric columns of the curve in CSV order.
func (c Curve) columns() []column {
	cols := []column{
		{"time_s", func(s Summary) float64 { return ptr(s.Time) }},
		{"load_N", func(s Summary) float64 { return ptr(s.Load) }},
		{"stress_MPa", func(s Summary) float64 { return ptr(s.Stress) }},
		{"valid_fraction", func(s Summary) float64 { return s.ValidFraction }},
		{"tracked_fraction", func(s Summary) float64 { return s.Tracked }},
		{"mean_zncc", func(s Summary) float64 { return s.MeanZNCC }},
	}
	for _, m := range MeanNames {
		cols = append(cols, column{"mean_" + m, func(s Summary) float64 {
			v, ok := s.Mean[m]
			if !ok {
				return math.NaN()
			}
			return v
		}})
	}
	for i, e := range c.Params.Extensometers {
		ext := func(s Summary) *ExtReading {
			if i < len(s.Extensometers) && s.Extensometers[i].Valid {
				return &s.Extensometers[i]
			}
			return nil
		}
		pre := "ext_" + e.Name + "_"
		cols = append(cols,
			column{pre + "L", func(s Summary) float64 {
				if r := ext(s); r != nil {
					return r.L
				}
				return math.NaN()
			}},
			column{pre + "stretch", func(s Summary) float64 {
				if r := ext(s); r != nil {
					return r.Stretch
				}
				return math.NaN()
			}},
			column{pre + "eng", func(s Summary) float64 {
				if r := ext(s); r != nil {
					return r.Eng
				}
				return math.NaN()
			}},
			column{pre + "eng_std", func(s Summary) float64 {
				if r := ext(s); r != nil {
					return ptr(r.EngStd)
				}
				return math.NaN()
			}},
			column{pre + "true", func(s Summary) float64 {
				if r := ext(s); r != nil {
					return r.True
				}
				return math.NaN()
			}},
			column{pre + "true_rate", func(s Summary) float64 {
				if r := ext(s); r != nil {
					return ptr(r.Rate)
				}
				return math.NaN()
			}})
	}
	k := 0
	for _, g := range c.Params.Gauges {
		for _, comp := range g.components() {
			i := k
			k++
			pre := "gauge_" + g.Name + "_" + comp + "_"
			gr := func(s Summary) *GaugeReading {
				if i < len(s.Gauges) && (s.Gauges[i].N > 0 || s.Mode == ModeReference) {
					return &s.Gauges[i]
				}
				return nil
			}
			cols = append(cols,
				column{pre + "mean", func(s Summary) float64 {
					if r := gr(s); r != nil {
						return r.Mean
					}
					return math.NaN()
				}},
				column{pre + "std", func(s Summary) float64 {
					if r := gr(s); r != nil {
						return r.Std
					}
					return math.NaN()
				}},
				column{pre + "rate", func(s Summary) float64 {
					if r := gr(s); r != nil {
						return ptr(r.Rate)
					}
					return math.NaN()
				}})
		}
	}
	// 1 when the frame's image quality is flagged (FrameQuality), 0 when
	// not, empty when it was not measured.
	cols = append(cols, column{"quality_flagged", func(s Summary) float64 {
		switch {
		case s.Quality == nil:
			return math.NaN()
		case s.Quality.Flagged:
			return 1
		}
		return 0
	}})
	return cols
}

// ColumnNames returns the CSV header: index, name, mode, static, then the
// numeric columns (see Column).
func (c Curve) ColumnNames() []string {
	names := []string{"index", "name", "mode", "static"}
	for _, col := range c.columns() {
		names = append(names, col.name)
	}
	return names
}

// WriteCSV writes the curve as CSV, one row per frame; missing values are
// empty cells. Numbers use the shortest exact representation.
func (c Curve) WriteCSV(w io.Writer) error {
	cw := csv.NewWriter(w)
	if err := cw.Write(c.ColumnNames()); err != nil {
		return fmt.Errorf("curve csv: %w", err)
	}
	cols := c.columns()
	for _, r := range c.Rows {
		rec := []string{strconv.Itoa(r.Index), r.Name, r.Mode, strconv.FormatBool(r.Static)}
		for _, col := range cols {
			v := col.get(r)
			if finite(v) {
				rec = append(rec, strconv.FormatFloat(v, 'g', -1, 64))
			} else {
				rec = append(rec, "")
			}
		}
		if err := cw.Write(rec); err != nil {
			return fmt.Errorf("curve csv: %w", err)
		}
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("curve csv: %w", err)
	}
	return nil
}

// Modes returns the frame indices done in each mode.
func (c Curve) Modes() map[string][]int {
	m := map[string][]int{}
	for _, r := range c.Rows {
		m[r.Mode] = append(m[r.Mode], r.Index)
	}
	for _, v := range m {
		sort.Ints(v)
	}
	return m
}

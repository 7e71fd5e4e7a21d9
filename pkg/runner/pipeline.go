package runner

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"strings"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
	"github.com/mottledic/mottle/pkg/results"
	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// Pipeline is the Analyzer of the real pipeline: pkg/analysis computes the
// field, pkg/field encodes it and pkg/maps draws the maps.
type Pipeline struct{}

// summaryQuantities are the quantities whose means a Summary carries.
var summaryQuantities = []string{"u", "v", "E11", "E22", "E12", "eps11", "eps22", "eps12",
	"H11", "H22", "H12", "rotation_deg", "E_max", "E_min", "von_mises", "zncc", "std_u", "std_v"}

// Run implements Analyzer.
func (Pipeline) Run(ctx context.Context, in Input, progress func(done, total int)) (*Result, error) {
	out, err := analysis.RunJob(ctx, analysis.Job{Ref: in.Ref, Def: in.Def, RefName: "reference", DefName: "deformed",
		Mask: in.Mask, Params: in.Params, Progress: progress, RefMeasures: in.RefMeasures, Threads: in.Threads})
	if err != nil {
		return nil, err
	}
	if !in.Orientation.Upright() {
		if out.Field.Meta.Extra == nil {
			out.Field.Meta.Extra = map[string]any{}
		}
		out.Field.Meta.Extra["orientation"] = in.Orientation.Meta()
	}
	res, err := EncodeFormats(out.Field, in.Formats)
	if err != nil {
		return nil, err
	}
	if ws := quality.Warnings(out.Quality); len(ws) > 0 {
		res.Summary.Warnings = ws
	}
	if rm := out.RefMeasures; rm.Pixels > 0 {
		res.RefMeasures = &rm
	}
	return res, nil
}

// allDataFormats are the formats Encode writes: every data format of the
// table of result files (pkg/results).
const allDataFormats = "npz,json,csv,vts,npy"

// DefaultFormats are the formats a job writes when its request names none:
// the stored result field.npz and field.json, which a ?wait=true answer
// carries. Every other file of the download routes is rendered from
// field.npz on first request and kept.
const DefaultFormats = results.NPZ + "," + results.JSON

// SeriesDefaultFormats are the formats a frame of a 2D series writes when
// the series' request names none: the stored result field.npz alone. A
// frame's answer carries no field, and field.json rendered from field.npz
// on first request is byte for byte the file the frame would have written
// (the field is float32: field.Float32), so writing it with every frame
// would only store, and in a replicated backend copy, its bytes (1.8 MB of
// a 512×512 frame's 3.5 MB, see BenchmarkClusterSeries in
// pkg/service/natsjs) for a file most frames never serve.
const SeriesDefaultFormats = results.NPZ

// servedFormats are the formats the download routes serve.
var servedFormats = map[string]bool{results.NPZ: true, results.JSON: true, results.CSV: true, results.VTS: true, results.NPY: true}

// ParseFormats checks the formats of a request (a comma-separated list of
// the data formats of pkg/results: npz, json, csv, vts, npy, or "all");
// "" is DefaultFormats. An unknown or unserved name is a *FieldError.
func ParseFormats(s string) (results.Set, error) {
	switch strings.TrimSpace(s) {
	case "all":
		s = allDataFormats
	case "":
		s = DefaultFormats
	}
	set, err := results.ParseFormats(s)
	if err != nil {
		return nil, &FieldError{Field: "formats", Status: 400, Detail: err.Error()}
	}
	for name := range set {
		if !servedFormats[name] {
			return nil, &FieldError{Field: "formats", Status: 400, Detail: fmt.Sprintf("%q is not served; use a comma-separated list of npz, json, csv, vts, npy, or all (maps come from map.png)", name)}
		}
	}
	return set, nil
}

// Encode encodes a field into every result file a job serves; see
// EncodeFormats.
func Encode(f *field.Field) (*Result, error) { return EncodeFormats(f, allDataFormats) }

// EncodeFormats encodes a field into the result files of the formats
// (ParseFormats) with the one table of result files (results.Encode):
// field.npz (always), field.json, field.csv, field.vts and
// arrays/<quantity>.npy with shape (Ny, Nx), including grid_x and grid_y
// (the table's npy/ files, stored under the name of their route), and its
// summary.
func EncodeFormats(f *field.Field, formats string) (*Result, error) {
	set, err := ParseFormats(formats)
	if err != nil {
		return nil, err
	}
	files, err := EncodeFiles(f, set)
	if err != nil {
		return nil, err
	}
	g := f.Grid
	sum := jobs.Summary{Points: g.Len(), Mean: map[string]float64{}}
	// Valid counts the measured points (a displacement), as the field's
	// "valid" quantity does; points without a strain value are still
	// measured.
	if vals, ok := f.Get("valid"); ok {
		for _, v := range vals {
			if v == 1 {
				sum.Valid++
			}
		}
	} else {
		for _, st := range f.Status {
			if st == "ok" {
				sum.Valid++
			}
		}
	}
	if sum.Points > 0 {
		sum.ValidFraction = float64(sum.Valid) / float64(sum.Points)
	}
	for _, q := range summaryQuantities {
		if s, err := f.Summary(q); err == nil && s.Count > 0 && !math.IsNaN(s.Mean) {
			sum.Mean[q] = s.Mean
		}
	}
	return &Result{Files: files, Summary: sum}, nil
}

// EncodeFiles encodes the formats in set of f by the names the service
// stores them under.
func EncodeFiles(f *field.Field, set results.Set) (map[string][]byte, error) {
	enc, err := results.Encode(context.Background(), f, results.Sources{}, set)
	if err != nil {
		return nil, err
	}
	files := make(map[string][]byte, len(enc))
	for name, b := range enc {
		if q, ok := strings.CutPrefix(name, "npy/"); ok {
			if !jobs.ValidName(q) {
				continue
			}
			name = "arrays/" + q
		}
		files[name] = b
	}
	return files, nil
}

// FormatOf returns the format of a stored result file name, or "".
func FormatOf(name string) string {
	switch {
	case name == "field.npz":
		return results.NPZ
	case name == "field.json":
		return results.JSON
	case name == "field.csv":
		return results.CSV
	case name == "field.vts":
		return results.VTS
	case strings.HasPrefix(name, "arrays/"):
		return results.NPY
	}
	return ""
}

// Map implements Analyzer: it reads field.json and renders req.Quantity
// with pkg/maps over bg. Over the deformed image each point is drawn at
// x = X + u, converting u from mm to px when the field is scaled.
func (Pipeline) Map(ctx context.Context, open func(name string) (io.ReadCloser, error), req MapRequest, bg *imageio.Gray) ([]byte, error) {
	f, err := ReadStored(open)
	if err != nil {
		return nil, err
	}
	return RenderMap(f, req, bg)
}

// ReadStored reads a job's stored result: field.npz, or field.json for
// results stored before field.npz held the metadata.
func ReadStored(open func(name string) (io.ReadCloser, error)) (*field.Field, error) {
	rc, err := open("field.npz")
	if err == nil {
		b, err := io.ReadAll(rc)
		rc.Close()
		if err != nil {
			return nil, fmt.Errorf("stored field.npz: %w", err)
		}
		f, err := field.ReadNPZ(bytes.NewReader(b), int64(len(b)))
		if err == nil {
			return f, nil
		}
	}
	rc, err = open("field.json")
	if err != nil {
		return nil, err
	}
	defer rc.Close()
	f, err := field.ReadJSON(rc)
	if err != nil {
		return nil, fmt.Errorf("stored field.json: %w", err)
	}
	return f, nil
}

// RenderMap draws the PNG map that Pipeline.Map serves, with the one map
// renderer (results.RenderMap). An unknown quantity, a field without
// displacement for on=deformed and an unusable range are *FieldErrors.
func RenderMap(f *field.Field, req MapRequest, bg *imageio.Gray) ([]byte, error) {
	r := results.MapRequest{Quantity: req.Quantity, OnDeformed: req.On == "deformed"}
	if req.Range != nil {
		r.Range = *req.Range
	}
	b, err := results.RenderMap(f, bg, r)
	var qe *results.QuantityError
	var re *results.RangeError
	switch {
	case err == nil:
		return b, nil
	case errors.As(err, &qe):
		return nil, &FieldError{Field: "quantity", Status: 400,
			Detail: fmt.Sprintf("the field has no quantity %q; use one of %s", qe.Name, strings.Join(qe.Have, ", "))}
	case errors.As(err, &re):
		return nil, &FieldError{Field: "range", Status: 400, Detail: re.Error()}
	case r.OnDeformed:
		return nil, &FieldError{Field: "on", Status: 400, Detail: err.Error() + "; use on=reference"}
	}
	return nil, err
}

// Frame implements FrameAnalyzer with the series engine pkg/series: the
// tracker is created on the reference (first frame) or restored from the
// state and the last frame, the frame is added, and its results are
// encoded like an analysis, with the tracker's summary (mean strains,
// gauge and extensometer readings, valid fraction, mode).
func (Pipeline) Frame(ctx context.Context, in FrameInput) (*Result, error) {
	var tr *series.Tracker
	var err error
	if in.State == nil {
		var p series.Params
		if p, err = DecodeSeriesParams(in.Params); err != nil {
			return nil, err
		}
		p.Analysis.Threads = in.Threads
		ref := in.RefName
		if ref == "" {
			ref = "reference"
		}
		tr, err = series.NewWith(in.Ref, series.FrameMeta{Name: ref}, p, series.Options{Mask: in.Mask})
	} else {
		var st series.State
		if st, err = series.DecodeStateWith(in.State, in.StateSolution); err != nil {
			return nil, fmt.Errorf("stored series state: %w", err)
		}
		st.Params.Analysis.Threads = in.Threads
		if in.Last == nil && in.LoadLast != nil {
			tr, err = series.RestoreLoading(in.Ref, in.LoadLast, st)
		} else {
			tr, err = series.Restore(in.Ref, in.Last, st)
		}
	}
	if err != nil {
		return nil, err
	}
	meta := series.FrameMeta{Name: in.Name, Time: in.Time, Load: in.Load, Progress: in.Progress, Orientation: in.Orientation}
	var sol *series.Solution
	if in.Solved != nil {
		if sol, err = series.DecodeSolution(in.Solved); err != nil {
			sol = nil // unreadable: correlate the frame in sequence
		}
	}
	fr, err := tr.AddSolved(ctx, in.Def, meta, sol)
	meta.Progress = nil
	if err != nil {
		return nil, err
	}
	f, err := series.FrameField(fr, tr.Params(), "reference", meta, in.Def.W, in.Def.H)
	if err != nil {
		return nil, err
	}
	res, err := EncodeFormats(f, in.Formats)
	if err != nil {
		return nil, err
	}
	switch {
	case in.StateJSON:
		res.State, err = tr.StateJSON()
	case sol != nil:
		res.State, err = tr.StateBinaryRef(in.Solved)
	default:
		res.State, err = tr.StateBinary()
	}
	if err != nil {
		return nil, err
	}
	res.Summary = frameSummary(res.Summary, fr.Summary)
	return res, nil
}

// frameSummary fills a job summary from the tracker's summary of a frame;
// the point counts come from the encoded field.
func frameSummary(base jobs.Summary, sm series.Summary) jobs.Summary {
	out := jobs.Summary{Points: base.Points, Valid: base.Valid, ValidFraction: sm.ValidFraction,
		Mean: map[string]float64{}, Mode: sm.Mode}
	for k, v := range sm.Mean {
		if !math.IsNaN(v) {
			out.Mean[k] = v
		}
	}
	for _, q := range []string{"rotation_deg", "E_max", "E_min", "von_mises", "zncc", "std_u", "std_v"} {
		if v, ok := base.Mean[q]; ok {
			out.Mean[q] = v
		}
	}
	z, tk := sm.MeanZNCC, sm.Tracked
	out.MeanZNCC, out.Tracked = &z, &tk
	out.Reacquired, out.ReturnedDirect = sm.Reacquired, sm.ReturnedDirect
	if sm.Quality != nil && len(sm.Quality.Warnings) > 0 {
		out.Warnings = sm.Quality.Warnings
	}
	g := map[string]float64{}
	for _, e := range sm.Extensometers {
		if e.Valid {
			g["ext_"+e.Name+"_eng"], g["ext_"+e.Name+"_true"], g["ext_"+e.Name+"_stretch"] = e.Eng, e.True, e.Stretch
			if e.EngStd != nil {
				g["ext_"+e.Name+"_eng_std"] = *e.EngStd
			}
		}
	}
	for _, r := range sm.Gauges {
		if r.N > 0 && !math.IsNaN(r.Mean) {
			k := "gauge_" + r.Gauge + "_" + r.Component
			g[k+"_mean"], g[k+"_std"] = r.Mean, r.Std
		}
	}
	if len(g) > 0 {
		out.Gauges = g
	}
	return out
}

// DecodeSeriesParams reads a series' stored parameter document (the flat
// document of series.Params.FlatJSON).
func DecodeSeriesParams(b []byte) (series.Params, error) {
	p, err := series.ParseParams(b)
	if err != nil {
		return p, fmt.Errorf("stored series parameters: %w", err)
	}
	return p, nil
}

// SolvesAhead implements FrameSolver: every mode but incremental-always
// starts a frame with a direct correlation (series.SolvesAhead), and
// after a series went incremental, auto mode with return_direct splits
// the chain at a frame that returns (series.SplitsAtReturn).
func (Pipeline) SolvesAhead(params json.RawMessage, incremental bool) (bool, error) {
	p, err := DecodeSeriesParams(params)
	if err != nil {
		return false, err
	}
	if incremental {
		return series.SplitsAtReturn(p), nil
	}
	return series.SolvesAhead(p), nil
}

// Solve implements FrameSolver with series.Solve.
func (Pipeline) Solve(ctx context.Context, in SolveInput) ([]byte, error) {
	p, err := DecodeSeriesParams(in.Params)
	if err != nil {
		return nil, err
	}
	p.Analysis.Threads = in.Threads
	var guess *series.Solution
	switch {
	case in.Guess != nil:
		if guess, err = series.DecodeSolution(in.Guess); err != nil {
			guess = nil
		} else if in.GuessBefore != nil {
			if before, err := series.DecodeSolution(in.GuessBefore); err == nil {
				guess = series.Extrapolate(before, guess, in.GuessRatio)
			}
		}
	case in.GuessState != nil:
		if g, err := series.SolutionOfState(in.GuessState); err == nil {
			guess = g
		}
	}
	sol, err := series.Solve(ctx, in.Ref, in.Def, p, series.Options{Mask: in.Mask}, guess, in.Progress)
	if err != nil {
		return nil, err
	}
	b, err := sol.MarshalBinary()
	if err != nil {
		return nil, fmt.Errorf("encode frame solution: %w", err)
	}
	return b, nil
}

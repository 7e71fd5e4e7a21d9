package results_test

import (
	"context"
	"math"
	"reflect"
	"testing"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/results"
	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/synth"
)

// A camera calibration's position mapping plugs into the field builder.
var _ results.Mapping = (*calib.Mapping)(nil)

// The series engine and mottle analyze build the same field from the same
// pair through the one field builder: the same quantities, units, status
// and metadata, value for value as the files hold them (float32). The
// analysis starts every point from zero motion, as the series' first frame
// does, so the correlations are the same too.
func TestSeriesFieldIsAnalysisField(t *testing.T) {
	m := synth.Affine{F: [2][2]float64{{1.012, 0.003}, {-0.002, 0.994}}, CX: 80, CY: 64, U: 0.8, V: -0.4}
	ref, def, err := synth.Pair(synth.PatternOptions{Diameter: 5, EdgeBlur: 1, Seed: 21}, m, synth.RenderOptions{W: 160, H: 128, Bits: 8})
	if err != nil {
		t.Fatal(err)
	}
	p := analysis.Defaults()
	p.Subset, p.Step, p.MMPerPx = 21, 8, 0.05
	ctx := context.Background()
	first, err := analysis.RunJob(ctx, analysis.Job{Ref: ref, Def: def, Params: p})
	if err != nil {
		t.Fatal(err)
	}
	start := make([]correlate.Point, first.Correlation.Grid.Len())
	for k := range start {
		start[k].Status = correlate.OK
	}
	a, err := analysis.RunJob(ctx, analysis.Job{Ref: ref, Def: def, Params: p, Start: start})
	if err != nil {
		t.Fatal(err)
	}
	sp := series.Defaults()
	sp.Analysis = p
	tr, err := series.New(ref, series.FrameMeta{Name: "reference"}, sp)
	if err != nil {
		t.Fatal(err)
	}
	fr, err := tr.Add(ctx, def, series.FrameMeta{Name: "deformed"})
	if err != nil {
		t.Fatal(err)
	}
	fa, fs := a.Field.Rounded(), fr.Field.Rounded()
	if !reflect.DeepEqual(fa.Grid, fs.Grid) || !reflect.DeepEqual(fa.Status, fs.Status) {
		t.Fatalf("grid or status differ: %v vs %v", fa.StatusCounts(), fs.StatusCounts())
	}
	if c := fa.StatusCounts(); c["ok"] < fa.Grid.Len()/2 {
		t.Fatalf("only %d of %d points ok", c["ok"], fa.Grid.Len())
	}
	for _, name := range fs.Names() {
		x, ok := fa.Get(name)
		if !ok {
			t.Errorf("the analysis field lacks %s", name)
			continue
		}
		y := fs.Quantities[name]
		for k := range x {
			if x[k] != y[k] && !(math.IsNaN(x[k]) && math.IsNaN(y[k])) {
				t.Errorf("%s[%d]: analysis %v, series %v", name, k, x[k], y[k])
				break
			}
		}
		if fa.Units[name] != fs.Units[name] {
			t.Errorf("%s: unit %q vs %q", name, fa.Units[name], fs.Units[name])
		}
	}
	// Only the per-point IC-GN iteration count is the analysis' own.
	for _, name := range fa.Names() {
		if _, ok := fs.Get(name); !ok && name != "iterations" {
			t.Errorf("the series field lacks %s", name)
		}
	}
	ma, ms := fa.Meta, fs.Meta
	if ma.VSG != ms.VSG || ma.StrainWindow != ms.StrainWindow || ma.StrainFit != ms.StrainFit || ma.MMPerPx != ms.MMPerPx || ma.Precision != ms.Precision {
		t.Errorf("metadata differ: %+v vs %+v", ma, ms)
	}
}

package series

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/field"
)

func TestOutputs(t *testing.T) {
	var ms []motion
	for n := 1; n <= 4; n++ {
		z := 0.99
		if n >= 3 {
			z = 0.2
		}
		ms = append(ms, motion{l1: 1 + 0.01*float64(n), l2: 1 - 0.003*float64(n), directZ: z})
	}
	f, imgs := newFake(ms)
	p := testParams()
	p.Extensometers = append(p.Extensometers, Extensometer{Name: "width", A: [2]float64{40, 24}, B: [2]float64{40, 56}})
	p.Area = 10
	p.StaticFrames = 1
	ms[0] = motion{l1: 1, l2: 1, directZ: 0.99} // frame 1 static
	f.mot[imgs[0]] = ms[0]
	p.Properties = PropsParams{Transverse: "width", ModulusRange: [2]float64{0.005, 0.05}}
	tr, err := newTracker(f.ref, FrameMeta{Load: ptrTo(0)}, p, f)
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	for n, im := range imgs {
		load := 100 * float64(n)
		meta := FrameMeta{Name: "f" + string(rune('0'+n)) + ".png", Load: &load}
		fr, err := tr.Add(context.Background(), im, meta)
		if err != nil {
			t.Fatal(err)
		}
		if _, err := WriteFrame(filepath.Join(dir, "frames", "0001"), fr, tr.Params(), "ref.png", meta, im, []string{"E11"}); err != nil {
			t.Fatal(err)
		}
	}
	c := tr.Curve()
	if c.Noise == nil || c.Noise.Frames != 1 {
		t.Fatalf("noise floor %+v, want one static frame", c.Noise)
	}
	files, err := WriteCurve(dir, c)
	if err != nil {
		t.Fatal(err)
	}
	plots, err := WritePlots(dir, c, c.Properties())
	if err != nil {
		t.Fatal(err)
	}
	if len(plots) != 4 {
		t.Errorf("plots %v, want 4", plots)
	}
	var buf bytes.Buffer
	if err := WriteReport(&buf, ReportInput{Curve: c, Plots: []string{"stress_strain.png"}, Maps: []ReportMap{{Path: "frames/0001/map_E11.png", Caption: "E11"}}}); err != nil {
		t.Fatal(err)
	}
	html := buf.String()
	for _, want := range []string{"ASTM E83", "licensed engineer", "incremental", "frames 3–4", "Noise floor", "map_E11.png", "Young"} {
		if !strings.Contains(html, want) {
			t.Errorf("report lacks %q", want)
		}
	}
	b, err := os.ReadFile(files[0])
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(string(b)), "\n")
	if len(lines) != 6 || !strings.Contains(lines[0], "ext_width_eng") || !strings.Contains(lines[4], "incremental") {
		t.Errorf("curve.csv:\n%s", b)
	}
	fj, err := os.Open(filepath.Join(dir, "frames", "0001", "field.json"))
	if err != nil {
		t.Fatal(err)
	}
	defer fj.Close()
	fl, err := field.ReadJSON(fj)
	if err != nil {
		t.Fatal(err)
	}
	if _, ok := fl.Get("E11"); !ok {
		t.Error("frame field lacks E11")
	}
}

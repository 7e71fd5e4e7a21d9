package series

import (
	"bytes"
	"context"
	"slices"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
	"github.com/mottledic/mottle/pkg/synth"
)

// Frames whose image quality drops against the reference are flagged in
// the curve and the report: saturation that appears (gain 1.4) and blur
// that rises (a lens blur of σ = 2 px); frames like the reference are not.
// The rendered truth (pkg/synth) fixes what each frame should show.
func TestFramesFlaggedForQuality(t *testing.T) {
	const w = 128
	m := synth.Translation{U: 0.6, V: -0.3}
	p1, err := synth.PatternFor(synth.PatternOptions{Seed: 7, Diameter: 5}, m, w, w)
	if err != nil {
		t.Fatal(err)
	}
	render := func(mo synth.Motion, ro synth.RenderOptions) *imageio.Gray {
		ro.W, ro.H, ro.Supersample = w, w, 2
		g, _, err := synth.Render(p1, mo, ro)
		if err != nil {
			t.Fatal(err)
		}
		return g
	}
	ref := render(synth.Identity{}, synth.RenderOptions{})
	frames := []struct {
		img  *imageio.Gray
		want []string
	}{
		{render(m, synth.RenderOptions{Noise: 0.5, Seed: 2}), nil},
		{render(m, synth.RenderOptions{Gain: 1.4 * 255}), []string{quality.Saturated, quality.BrightnessChange}},
		{render(m, synth.RenderOptions{Blur: 2}), []string{quality.Blurred, quality.ContrastDrop, quality.BlurRise}},
	}
	p := Defaults()
	p.Analysis.Subset, p.Analysis.Step = 21, 16
	tr, err := New(ref, FrameMeta{Name: "ref"}, p)
	if err != nil {
		t.Fatal(err)
	}
	for i, f := range frames {
		fr, err := tr.Add(context.Background(), f.img, FrameMeta{})
		if err != nil {
			t.Fatal(err)
		}
		q := fr.Summary.Quality
		var got []string
		for _, w := range q.Warnings {
			got = append(got, w.Code)
		}
		t.Logf("frame %d: change %+v, warnings %v", i+1, q.Change, got)
		if !slices.Equal(got, f.want) || q.Flagged != (len(f.want) > 0) {
			t.Errorf("frame %d: warnings %v (flagged %v), want %v", i+1, got, q.Flagged, f.want)
		}
	}
	c := tr.Curve()
	if fl := c.Flagged(); !slices.Equal(fl, []int{2, 3}) {
		t.Errorf("flagged rows %v, want [2 3]", fl)
	}
	if q := c.Rows[0].Quality; q == nil || q.Flagged {
		t.Errorf("reference row quality %+v: a good reference is measured and not flagged", q)
	}
	col := c.Column("quality_flagged")
	if len(col) != 4 || col[1] != 0 || col[2] != 1 || col[3] != 1 {
		t.Errorf("quality_flagged column %v", col)
	}
	var html bytes.Buffer
	if err := WriteReport(&html, ReportInput{Curve: c}); err != nil {
		t.Fatal(err)
	}
	if s := html.String(); !strings.Contains(s, "Image quality") || !strings.Contains(s, "shorten the exposure") || !strings.Contains(s, "refocus") {
		t.Errorf("report does not list the flagged frames with their fixes")
	}
}

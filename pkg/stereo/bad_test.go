package stereo

import (
	"context"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/imageio"
)

// TestBadInput: pairs of different sizes, images of another size than
// the rig's, bad options and a state from another reference are errors
// that say what would work; a blank pair is measured as no points, not as
// numbers.
func TestBadInput(t *testing.T) {
	_, _, rig := bench(320, 240)
	ctx := context.Background()
	a, b := imageio.NewGray(320, 240), imageio.NewGray(320, 240)
	cases := []struct {
		name string
		l, r *imageio.Gray
		o    Options
		want string
	}{
		{"sizes differ", a, imageio.NewGray(240, 320), Options{}, "same size"},
		{"other rig size", imageio.NewGray(640, 480), imageio.NewGray(640, 480), Options{}, "calibrated on 320×240"},
		{"missing", a, nil, Options{}, "missing"},
		{"depths", a, b, Options{MinDepth: 600, MaxDepth: 400}, "depth range"},
		{"subset", a, b, Options{Correlate: correlate.Options{Subset: 4}}, "subset"},
	}
	for _, c := range cases {
		_, err := Match(ctx, rig, c.l, c.r, c.o)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: error %v, want one containing %q", c.name, err, c.want)
		}
	}
	ref, err := Match(ctx, rig, a, b, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if ref.OK() != 0 {
		t.Errorf("blank pair: %d points measured", ref.OK())
	}
	for _, p := range ref.Points {
		if p.Status != StereoMatch || (p.Match != correlate.LowContrast && p.Match != correlate.Unreached) {
			t.Fatalf("blank pair: point status %v / %v, want stereo_match / low_contrast or unreached", p.Status, p.Match)
		}
	}
	if _, err := ref.Track(ctx, a, b, a, imageio.NewGray(10, 10)); err == nil || !strings.Contains(err.Error(), "deformed pair") {
		t.Errorf("deformed pair of different sizes: error %v", err)
	}
	if _, err := Strain(ref, &State{}, StrainOptions{}); err == nil {
		t.Error("state of another reference: want an error")
	}
	if _, err := Strain(ref, &State{Points: make([]StatePoint, len(ref.Points))}, StrainOptions{Window: 4}); err == nil {
		t.Error("even window: want an error")
	}
}

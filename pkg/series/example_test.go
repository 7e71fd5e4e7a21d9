package series_test

import (
	"context"
	"encoding/json"
	"fmt"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/synth"
)

// Example follows a rendered strip (demo data) through three frames of a
// uniaxial stretch, saves the state after the second frame as a server
// would, restores it and finishes the series.
func Example() {
	const w, h = 128, 96
	var frames []*imageio.Gray
	pat, _ := synth.NewPattern(synth.PatternOptions{Diameter: 4, Seed: 3, Bounds: synth.ImageRect(w, h, 16)})
	for _, e := range []float64{0, 0.01, 0.02, 0.03} {
		m := synth.Affine{F: [2][2]float64{{1 + e, 0}, {0, 1 - 0.3*e}}, CX: 64, CY: 48}
		g, _, _ := synth.Render(pat, m, synth.RenderOptions{W: w, H: h, Bits: 12})
		frames = append(frames, g)
	}
	p := series.Defaults()
	p.Analysis.Subset, p.Analysis.Step = 21, 8
	p.Extensometers = []series.Extensometer{{Name: "axial", A: [2]float64{24, 48}, B: [2]float64{104, 48}}}

	t0 := 0.0
	tr, err := series.New(frames[0], series.FrameMeta{Name: "ref", Time: &t0}, p)
	if err != nil {
		fmt.Println(err)
		return
	}
	ctx := context.Background()
	for i := 1; i <= 2; i++ {
		ts := float64(i)
		if _, err := tr.Add(ctx, frames[i], series.FrameMeta{Time: &ts}); err != nil {
			fmt.Println(err)
			return
		}
	}
	saved, _ := json.Marshal(tr.State()) // store it with the last frame

	var st series.State
	_ = json.Unmarshal(saved, &st)
	tr, err = series.Restore(frames[0], frames[2], st)
	if err != nil {
		fmt.Println(err)
		return
	}
	ts := 3.0
	fr, err := tr.Add(ctx, frames[3], series.FrameMeta{Time: &ts})
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, r := range tr.Curve().Rows {
		fmt.Printf("frame %d %-9s axial strain %.4f\n", r.Index, r.Mode, r.Extensometers[0].Eng)
	}
	// Rate is the true (logarithmic) strain rate d ln(1 + e)/dt: at a
	// constant engineering rate of 0.01 /s it is 0.01/(1 + e) = 0.0097 /s
	// at e = 0.03 (derived from the definition of true strain).
	fmt.Printf("strain rate %.4f /s\n", *fr.Summary.Extensometers[0].Rate)
	// Output:
	// frame 0 reference axial strain 0.0000
	// frame 1 direct    axial strain 0.0100
	// frame 2 direct    axial strain 0.0200
	// frame 3 direct    axial strain 0.0300
	// strain rate 0.0097 /s
}

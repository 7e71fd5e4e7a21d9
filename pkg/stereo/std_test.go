package stereo

import (
	"context"
	"math"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// TestDisplacementStd checks the predicted std of the 3D displacement
// against the scatter it predicts. The specimen does not move: the
// reference pair and four later pairs differ only in camera noise, so
// every displacement is an error. Pooled over points and pairs, the RMS
// of each component's error must match the RMS of its predicted std:
// first-order propagation of the image-match stds through triangulation
// (the law of propagation of uncertainty, JCGM 100:2008, "Evaluation of
// measurement data — Guide to the expression of uncertainty in
// measurement", 5.1), where the right reference position's match error
// is common to the reference and the deformed position and cancels in
// their difference (5.2, correlated input quantities). Counted twice, as
// before this test, it made the predicted std of y and z 4.5–4.9 times
// the scatter.
//
// The same pairs, followed incrementally (pair 1 from the reference,
// pairs 2 and 3 each from the one before), check that the random walk of
// TrackFrom bounds the scatter from above: on static pairs the noise terms
// of successive increments telescope, so the scatter stays that of one
// pair while the prediction grows as √k.
func TestDisplacementStd(t *testing.T) {
	_, _, rig := bench(figW, figH)
	sc := newScene(t, 3)
	flat := synth.Placement{Shape: synth.Plane{}}
	sc.ref = flat
	l0, r0 := sc.pair(flat, flat, 0)
	ctx := context.Background()
	ref, err := Match(ctx, rig, l0, r0, figOptions(t))
	if err != nil {
		t.Fatal(err)
	}
	// pooled returns, per axis, the RMS error and the RMS predicted std.
	pooled := func(sts ...*State) (got, pred [3]float64, n int) {
		for _, st := range sts {
			for _, p := range st.Points {
				if p.Status != OK {
					continue
				}
				for i := range 3 {
					got[i] += p.Disp[i] * p.Disp[i]
					pred[i] += p.Std[i] * p.Std[i]
				}
				n++
			}
		}
		for i := range 3 {
			got[i], pred[i] = math.Sqrt(got[i]/float64(max(n, 1))), math.Sqrt(pred[i]/float64(max(n, 1)))
		}
		return got, pred, n
	}
	var direct []*State
	var ls, rs []*imageio.Gray
	for k := int64(1); k <= 4; k++ {
		l, r := sc.pair(flat, flat, k)
		ls, rs = append(ls, l), append(rs, r)
		st, err := ref.Track(ctx, l0, r0, l, r)
		if err != nil {
			t.Fatal(err)
		}
		direct = append(direct, st)
	}
	axes := []string{"x", "y", "z"}
	got, pred, n := pooled(direct...)
	if n < 500 {
		t.Fatalf("%d measured samples, want at least 500", n)
	}
	for i, a := range axes {
		r := pred[i] / got[i]
		t.Logf("direct, %s: scatter %.6f mm, predicted %.6f mm, ratio %.2f (%d samples)", a, got[i], pred[i], r, n)
		// 936 samples, four pairs per point: the RMS is known to a few %.
		if !(r > 0.85 && r < 1.15) {
			t.Errorf("direct, %s: predicted std %.6f mm for a scatter of %.6f mm (ratio %.2f): want 0.85–1.15", a, pred[i], got[i], r)
		}
	}
	// The surface strain of the same states: its predicted std against
	// its scatter, pooled the same way (Strain's propagation with the
	// overlap correlation of neighbouring subsets and each point's 3×3
	// displacement covariance).
	var se2, ss2 [3]float64
	ns := 0
	for _, st := range direct {
		sf, err := Strain(ref, st, StrainOptions{})
		if err != nil {
			t.Fatal(err)
		}
		for _, q := range sf {
			if !q.OK {
				continue
			}
			e := [3]float64{q.M.E[0][0], q.M.E[1][1], q.M.E[0][1]}
			for c := range 3 {
				se2[c] += e[c] * e[c]
				ss2[c] += q.StdE[c] * q.StdE[c]
			}
			ns++
		}
	}
	if ns < 300 {
		t.Fatalf("%d strain values, want at least 300", ns)
	}
	for c, name := range []string{"E11", "E22", "E12"} {
		got, pred := math.Sqrt(se2[c]/float64(ns)), math.Sqrt(ss2[c]/float64(ns))
		r := pred / got
		t.Logf("surface strain %s: scatter %.3g, predicted %.3g, ratio %.2f (%d values)", name, got, pred, r, ns)
		// Measured 1.34, 1.06 and 1.22 (E11, E22, E12); 2.22, 1.06 and
		// 1.70 with the axes' covariances left out.
		if !(r > 0.75 && r < 1.6) {
			t.Errorf("surface strain %s: predicted std %.3g for a scatter of %.3g (ratio %.2f): want 0.75–1.6", name, pred, got, r)
		}
	}
	st := direct[0]
	for k := 1; k < 3; k++ {
		if st, err = ref.TrackFrom(ctx, st, ls[k-1], rs[k-1], ls[k], rs[k]); err != nil {
			t.Fatal(err)
		}
		got, pred, n := pooled(st)
		for i, a := range axes {
			r := pred[i] / got[i]
			t.Logf("incremental pair %d, %s: scatter %.6f mm, predicted %.6f mm, ratio %.2f (%d samples)", k+1, a, got[i], pred[i], r, n)
			if w := math.Sqrt(float64(k + 1)); !(r > 0.85 && r < 1.2*w) {
				t.Errorf("incremental pair %d, %s: predicted std %.6f mm for a scatter of %.6f mm (ratio %.2f): want 0.85–%.2f (a bound from above, at most 1.2·√%d)", k+1, a, pred[i], got[i], r, 1.2*w, k+1)
			}
		}
	}
}

// TestSavedStateCov: a state's cross-axis covariances survive Save and
// State; a state saved before they were kept (no Cov) reads with
// uncorrelated axes, and covariances of the wrong length are reported as
// damage, not read.
func TestSavedStateCov(t *testing.T) {
	st := &State{Points: []StatePoint{
		{Status: OK, Std: [3]float64{1, 2, 3}, Cov: [3]float64{0.5, -0.25, 1.5}},
		{Status: LeftTrack},
	}}
	sv := st.Save()
	back, err := sv.State(2)
	if err != nil {
		t.Fatal(err)
	}
	if back.Points[0].Cov != st.Points[0].Cov || back.Points[0].Std != st.Points[0].Std {
		t.Errorf("restored %+v, want %+v", back.Points[0], st.Points[0])
	}
	old := sv
	old.Cov = nil
	if back, err = old.State(2); err != nil || back.Points[0].Cov != [3]float64{} {
		t.Errorf("state without covariances: %+v, %v; want zero covariances and no error", back, err)
	}
	bad := sv
	bad.Cov = bad.Cov[:4]
	if _, err := bad.State(2); err == nil || !strings.Contains(err.Error(), "damaged") {
		t.Errorf("4 covariances for 2 points: error %v, want one that says the state is damaged", err)
	}
}

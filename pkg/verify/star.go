package verify

import (
	"fmt"

	"github.com/mottledic/mottle/pkg/synth"
)

// StarRender describes a rendered stand-in for the DIC Challenge 2.0 star
// images: a W×H 8-bit star pair with v = A·cos(2π(y − H/2)/p(x)), p linear
// in x from PeriodMin at x = 0 to PeriodMax at x = W − 1, and a static pair
// of StaticSize² px, both with Gaussian image noise Noise. The challenge's
// own images are larger (several thousand px wide, from memory); the
// protocol does not depend on the size as long as PeriodMax exceeds the
// resolution of the largest subset.
type StarRender struct {
	W, H                 int     // default 2000 × 128
	StaticSize           int     // default 256
	Amplitude            float64 // default 0.5 px
	PeriodMin, PeriodMax float64 // default 10 and 300 px
	Noise                float64 // grey levels; default 2, negative = none
	Seed                 int64
}

// Render draws the static and star pairs (Boolean-model disc speckles of
// 4 px diameter, pkg/synth) and returns them as a StarSet.
func (s StarRender) Render() (StarSet, error) {
	if s.W == 0 {
		s.W = 2000
	}
	if s.H == 0 {
		s.H = 128
	}
	if s.StaticSize == 0 {
		s.StaticSize = 256
	}
	if s.Amplitude == 0 {
		s.Amplitude = 0.5
	}
	if s.PeriodMin == 0 {
		s.PeriodMin = 10
	}
	if s.PeriodMax == 0 {
		s.PeriodMax = 300
	}
	if s.Noise == 0 {
		s.Noise = 2
	} else if s.Noise < 0 {
		s.Noise = 0
	}
	star := synth.Star{Amplitude: s.Amplitude, PeriodMin: s.PeriodMin, PeriodMax: s.PeriodMax,
		X0: 0, X1: float64(s.W - 1), Y0: float64(s.H / 2)}
	if err := star.Validate(); err != nil {
		return StarSet{}, fmt.Errorf("star render: %w", err)
	}
	po := synth.PatternOptions{Diameter: 4, Coverage: 0.5, Seed: s.Seed}
	ref, def, err := synth.Pair(po, star, synth.RenderOptions{W: s.W, H: s.H, Noise: s.Noise, Seed: s.Seed + 10})
	if err != nil {
		return StarSet{}, fmt.Errorf("star render: star pair: %w", err)
	}
	po.Seed = s.Seed + 1
	sr, sd, err := synth.Pair(po, synth.Identity{}, synth.RenderOptions{W: s.StaticSize, H: s.StaticSize, Noise: s.Noise, Seed: s.Seed + 20})
	if err != nil {
		return StarSet{}, fmt.Errorf("star render: static pair: %w", err)
	}
	return StarSet{StaticRef: sr, StaticDef: sd, Ref: ref, Def: def, Amplitude: s.Amplitude, Y0: s.H / 2,
		Period: func(x float64) float64 { p, _ := star.Period(x); return p }}, nil
}

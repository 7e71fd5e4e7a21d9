package synth

import (
	"context"
	"errors"
	"fmt"
	"math"

	"github.com/mottledic/mottle/pkg/imageio"
)

// Frame is one image of a synthetic test series.
type Frame struct {
	// Index is the frame number, from 0.
	Index int `json:"index"`
	// Time is the time stamp in s.
	Time float64 `json:"time_s"`
	// Factor is the load factor the motion was scaled by (Scaler).
	Factor float64 `json:"factor"`
	// Load is the load value recorded with the frame: Factor × the full
	// load (in the caller's unit, e.g. N or MPa).
	Load float64 `json:"load"`
	// Motion is the true motion from the reference to this frame.
	Motion Motion `json:"-"`
	// NoiseSeed is the noise seed RenderSeries uses for this frame.
	NoiseSeed int64 `json:"noise_seed"`
}

// Ramp returns the n+1 load factors 0, 1/n, …, 1 of a linear ramp (n ≥ 1).
func Ramp(n int) []float64 {
	n = max(n, 1)
	f := make([]float64, n+1)
	for i := range f {
		f[i] = float64(i) / float64(n)
	}
	return f
}

// LoadSeries returns one frame per load factor: frame i carries m scaled
// by factors[i] (see Scaler), the time stamp i·dt s and the load
// factors[i]·fullLoad. m must implement Scaler.
func LoadSeries(m Motion, factors []float64, dt, fullLoad float64) ([]Frame, error) {
	if len(factors) == 0 {
		return nil, errors.New("load series: no load factors; give at least one")
	}
	if !(dt > 0) || math.IsInf(dt, 0) {
		return nil, fmt.Errorf("load series: frame interval %g s: use a positive interval", dt)
	}
	frames := make([]Frame, len(factors))
	for i, f := range factors {
		if math.IsNaN(f) || math.IsInf(f, 0) {
			return nil, fmt.Errorf("load series: factor %d is %g: use finite factors", i, f)
		}
		mi, err := Scale(m, f)
		if err != nil {
			return nil, fmt.Errorf("load series: %w", err)
		}
		frames[i] = Frame{Index: i, Time: float64(i) * dt, Factor: f, Load: f * fullLoad, Motion: mi}
	}
	return frames, nil
}

// StaticSeries returns n frames of the same state m (nil = no motion),
// re-imaged every dt s: rendered by RenderSeries each frame gets fresh
// noise, for noise-floor studies (the iDICs Good Practices Guide 2018
// recommends stationary images for the noise floor). Factor is 1 and Load
// is load on every frame.
func StaticSeries(m Motion, n int, dt, load float64) []Frame {
	if m == nil {
		m = Identity{}
	}
	frames := make([]Frame, max(n, 0))
	for i := range frames {
		frames[i] = Frame{Index: i, Time: float64(i) * dt, Factor: 1, Load: load, Motion: m}
	}
	return frames
}

// RenderSeries renders every frame of a series of the pattern p and calls
// emit with each image in order. Frame i is rendered with noise seed
// o.Seed + 1 + i (written back to frames[i].NoiseSeed), so a reference
// rendered with o.Seed never shares noise with a frame. It stops at the
// first error from emit or when ctx is cancelled.
func RenderSeries(ctx context.Context, p *Pattern, frames []Frame, o RenderOptions,
	emit func(f Frame, g *imageio.Gray, r Report) error) error {
	for i := range frames {
		if err := ctx.Err(); err != nil {
			return err
		}
		ro := o
		ro.Seed = o.Seed + 1 + int64(i)
		frames[i].NoiseSeed = ro.Seed
		m := frames[i].Motion
		if m == nil {
			m = Identity{}
		}
		g, rep, err := Render(p, m, ro)
		if err != nil {
			return fmt.Errorf("frame %d: %w", i, err)
		}
		if err := emit(frames[i], g, rep); err != nil {
			return fmt.Errorf("frame %d: %w", i, err)
		}
	}
	return nil
}

// BoundsForSeries returns a pattern region covering every frame of the
// series (see BoundsFor).
func BoundsForSeries(frames []Frame, w, h int, margin float64) Rect {
	r := ImageRect(w, h, margin)
	for _, f := range frames {
		b := BoundsFor(f.Motion, w, h, margin)
		r.X0, r.Y0 = math.Min(r.X0, b.X0), math.Min(r.Y0, b.Y0)
		r.X1, r.Y1 = math.Max(r.X1, b.X1), math.Max(r.Y1, b.Y1)
	}
	return r
}

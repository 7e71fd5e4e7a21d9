package verify

import (
	"context"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"time"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// Case is one cross-check: a rendered image pair, a subset size and a grid
// of points on which Mottle and the reference methods are compared.
type Case struct {
	Name   string
	Motion synth.Motion
	W, H   int     // image size, px
	Subset int     // subset side, px
	Step   int     // spacing of the point grid, px
	Margin int     // points keep this many px from the edges beyond the half subset
	Noise  float64 // image noise σ, grey levels (8-bit images)
	Seed   int64   // speckle pattern seed
	// Applies lists the reference methods whose motion model covers this
	// case (translation for Phase and PhaseHann, affine for ECC and
	// ECCDefault). The check fails if
	// Mottle's RMS error is larger than the best of these.
	Applies []Method
	// Methods are the reference methods to run; nil = all five.
	Methods []Method
}

// CaseResult holds every method's answer on a case.
type CaseResult struct {
	Case   Case
	Points [][2]int
	Truth  [][2]float64

	Mottle     []Disp
	MottleErr  ErrorStats
	MottleTime time.Duration

	Ref      map[Method]*Response
	RefErr   map[Method]ErrorStats // against the truth
	RefAgree map[Method]ErrorStats // against Mottle, on points both measured
}

// Render draws the reference and deformed images of c: 8-bit, Boolean-model
// disc speckles of 4 px diameter, exact pixel integration (pkg/synth).
func (c Case) Render() (ref, def *imageio.Gray, err error) {
	po := synth.PatternOptions{Diameter: 4, Coverage: 0.5, Seed: c.Seed}
	ro := synth.RenderOptions{W: c.W, H: c.H, Noise: c.Noise, Seed: c.Seed + 100}
	ref, def, err = synth.Pair(po, c.Motion, ro)
	if err != nil {
		return nil, nil, fmt.Errorf("case %s: render: %w", c.Name, err)
	}
	return ref, def, nil
}

// Grid returns the case's points and the exact displacement at each.
func (c Case) Grid() ([][2]int, [][2]float64) {
	m := c.Subset/2 + c.Margin
	var pts [][2]int
	var truth [][2]float64
	for y := m; y < c.H-m; y += c.Step {
		for x := m; x < c.W-m; x += c.Step {
			pts = append(pts, [2]int{x, y})
			t := synth.At(c.Motion, float64(x), float64(y))
			truth = append(truth, [2]float64{t.U, t.V})
		}
	}
	return pts, truth
}

// CrossCheck renders c, writes the images as .npy files into dir, runs
// track and every reference method on the same points, and compares each
// with the truth and with Mottle. The reference methods start from the
// integer search of matchTemplate (search radius 4 px around zero):
// ECC inside its driver, the phase methods through Request.Guess.
func CrossCheck(ctx context.Context, c Case, r Runner, track Tracker, dir string) (*CaseResult, error) {
	ref, def, err := c.Render()
	if err != nil {
		return nil, err
	}
	pts, truth := c.Grid()
	if len(pts) == 0 {
		return nil, fmt.Errorf("case %s: no points fit a %d×%d image", c.Name, c.W, c.H)
	}
	res := &CaseResult{Case: c, Points: pts, Truth: truth,
		Ref: map[Method]*Response{}, RefErr: map[Method]ErrorStats{}, RefAgree: map[Method]ErrorStats{}}

	start := time.Now()
	res.Mottle, err = track(ctx, ref, def, pts, c.Subset)
	res.MottleTime = time.Since(start)
	if err != nil {
		return nil, fmt.Errorf("case %s: mottle: %w", c.Name, err)
	}
	if res.MottleErr, err = Errors(res.Mottle, truth); err != nil {
		return nil, fmt.Errorf("case %s: mottle: %w", c.Name, err)
	}

	base := filepath.Join(dir, strings.ReplaceAll(c.Name, " ", "_"))
	rp, dp := base+"-ref.npy", base+"-def.npy"
	if err := WriteNPY(rp, ref); err != nil {
		return nil, err
	}
	if err := WriteNPY(dp, def); err != nil {
		return nil, err
	}
	defer os.Remove(rp)
	defer os.Remove(dp)

	methods := c.Methods
	if methods == nil {
		methods = []Method{Template, ECC, ECCDefault, Phase, PhaseHann}
	}
	const search = 4
	var guess [][2]float64 // from Template, for Phase
	for _, m := range append([]Method{Template}, methods...) {
		if _, done := res.Ref[m]; done {
			continue
		}
		req := Request{Reference: rp, Deformed: dp, Method: m, Subset: c.Subset, Search: search, Points: pts}
		if m == Phase || m == PhaseHann {
			req.Guess = guess
		}
		resp, err := r.Run(ctx, req)
		if err != nil {
			return nil, fmt.Errorf("case %s: %w", c.Name, err)
		}
		if m == Template {
			guess = make([][2]float64, len(pts))
			for i, p := range resp.Points {
				guess[i] = [2]float64{p.U, p.V}
			}
		}
		res.Ref[m] = resp
		if res.RefErr[m], err = Errors(resp.Disp(), truth); err != nil {
			return nil, err
		}
		if res.RefAgree[m], err = Agreement(resp.Disp(), res.Mottle); err != nil {
			return nil, err
		}
	}
	return res, nil
}

// Best returns the reference method in c.Applies with the smallest RMS
// error against the truth, and that error; ok is false if none applies.
func (r *CaseResult) Best() (m Method, rms float64, ok bool) {
	rms = math.Inf(1)
	for _, a := range r.Case.Applies {
		e, have := r.RefErr[a]
		if have && e.N > 0 && e.RMS < rms {
			m, rms, ok = a, e.RMS, true
		}
	}
	return m, rms, ok
}

// CrossCheckTable formats the results as Markdown: for each case, every
// method's error against the exact truth (Mottle first), and each library's
// agreement with Mottle.
func CrossCheckTable(rs []*CaseResult) string {
	var b strings.Builder
	b.WriteString("| case | subset | points | method | RMS error (px) | max error (px) | mean error u, v (px) | failed | RMS diff. to Mottle (px) | model applies |\n")
	b.WriteString("|---|---:|---:|---|---:|---:|---|---:|---:|---|\n")
	for _, r := range rs {
		row := func(name string, e ErrorStats, agree string, applies string) {
			fmt.Fprintf(&b, "| %s | %d | %d | %s | %.5f | %.5f | %+.5f, %+.5f | %d | %s | %s |\n",
				r.Case.Name, r.Case.Subset, len(r.Points), name, e.RMS, e.Max, e.MeanU, e.MeanV, e.Failed, agree, applies)
		}
		row("**Mottle IC-GN**", r.MottleErr, "–", "")
		for _, m := range []Method{ECC, ECCDefault, Phase, PhaseHann, Template} {
			e, ok := r.RefErr[m]
			if !ok {
				continue
			}
			ap := ""
			for _, a := range r.Case.Applies {
				if a == m {
					ap = "yes"
				}
			}
			row(m.Label(), e, fmt.Sprintf("%.5f", r.RefAgree[m].RMS), ap)
		}
	}
	return b.String()
}

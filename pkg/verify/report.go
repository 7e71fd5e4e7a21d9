package verify

import (
	"fmt"
	"image/color"
	"math"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// ChallengeTable formats protocol results as a Markdown table.
func ChallengeTable(rs []SubsetResult) string {
	var b strings.Builder
	b.WriteString("| subset (px) | σ_u (px) | σ_v (px) | σ_v predicted (px) | resolution p₁₀ (px) | theory p₁₀ (px) | p₁₀ / subset | MEI = σ_v·p₁₀ (px²) | valid points |\n")
	b.WriteString("|---:|---:|---:|---:|---:|---:|---:|---:|---:|\n")
	for _, r := range rs {
		pred := "–"
		if r.PredictedNoise > 0 {
			pred = fmt.Sprintf("%.4f", r.PredictedNoise)
		}
		fmt.Fprintf(&b, "| %d | %.4f | %.4f | %s | %s | %.1f | %s | %s | %d/%d |\n",
			r.Subset, r.NoiseU, r.NoiseV, pred, fmtNaN(r.Resolution, "%.1f"), r.Theory,
			fmtNaN(r.Resolution/float64(r.Subset), "%.2f"), fmtNaN(r.MEI, "%.3f"), r.Valid, r.Points)
	}
	for _, r := range rs {
		if r.Note != "" {
			fmt.Fprintf(&b, "\nsubset %d: %s", r.Subset, r.Note)
		}
	}
	return b.String()
}

func fmtNaN(v float64, f string) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return "n/a"
	}
	return fmt.Sprintf(f, v)
}

// Series is one labelled set of protocol results for PlotChallenge.
type Series struct {
	Label   string
	Results []SubsetResult
}

// PlotChallenge draws displacement noise σ_v against spatial resolution
// p₁₀, one line per series with each point labelled by its subset size,
// and writes it as a PNG (or any format gonum/plot infers from the file
// extension) to path.
func PlotChallenge(path, title string, series ...Series) error {
	p := plot.New()
	p.Title.Text = title
	p.X.Label.Text = "spatial resolution: period at 10 % attenuation (px)"
	p.Y.Label.Text = "displacement noise σ_v (px)"
	p.Add(plotter.NewGrid())
	colours := []color.Color{
		color.RGBA{0, 114, 178, 255}, color.RGBA{213, 94, 0, 255},
		color.RGBA{0, 158, 115, 255}, color.RGBA{204, 121, 167, 255},
	}
	for i, s := range series {
		var xy plotter.XYs
		var labels []string
		for _, r := range s.Results {
			if math.IsNaN(r.Resolution) || math.IsNaN(r.NoiseV) {
				continue
			}
			xy = append(xy, plotter.XY{X: r.Resolution, Y: r.NoiseV})
			labels = append(labels, fmt.Sprintf("%d", r.Subset))
		}
		if len(xy) == 0 {
			continue
		}
		line, points, err := plotter.NewLinePoints(xy)
		if err != nil {
			return fmt.Errorf("plot %s: %w", s.Label, err)
		}
		c := colours[i%len(colours)]
		line.Color = c
		points.Color = c
		points.Shape = draw.CircleGlyph{}
		p.Add(line, points)
		p.Legend.Add(s.Label, line, points)
		l, err := plotter.NewLabels(plotter.XYLabels{XYs: xy, Labels: labels})
		if err != nil {
			return fmt.Errorf("plot %s labels: %w", s.Label, err)
		}
		for j := range l.TextStyle {
			l.TextStyle[j].Color = c
		}
		l.Offset = vg.Point{X: vg.Points(4), Y: vg.Points(4)}
		p.Add(l)
	}
	p.Legend.Top = true
	if err := p.Save(7*vg.Inch, 4.5*vg.Inch, path); err != nil {
		return fmt.Errorf("plot %s: %w", path, err)
	}
	return nil
}

// ChallengeNotes explains the columns of ChallengeTable, for reports.
const ChallengeNotes = `Columns: σ_u, σ_v are the standard deviations of u and v over a grid on a static pair (same state, independent noise). ` +
	`"σ_v predicted" is √2·σ/√(Σ g_y²) over the subset (Wang, Li, Tong & Ruan 2007, Exp. Mech. 47:701). ` +
	`Resolution p₁₀ is the period of the star displacement v = A·cos(2π(y − y₀)/p(x)) at which the measured amplitude on the crest row, smoothed along x, first stays below 0.9·A (DIC Challenge 2.0, Reu et al. 2022, Exp. Mech. 62:639; protocol details from memory). ` +
	`"Theory p₁₀" is the least-squares filter response of the subset's shape function: first order gives the Dirichlet kernel sin(πN/p)/(N·sin(π/p)) = 0.9 at p ≈ 3.99·N, second order p ≈ 1.3·N (derived in pkg/verify/theory.go). ` +
	`MEI, the metrological efficiency indicator, is taken here as σ_v × p₁₀ in px² (lower is better); the definition is from memory of Reu et al. 2022 and Grédiac, Blaysat & Sur 2017 (Exp. Mech. 57:871), and some authors also divide by the image noise σ.`

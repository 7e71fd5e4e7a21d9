package series

import (
	"fmt"
	"image/color"
	"io"
	"path/filepath"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"github.com/mottledic/mottle/pkg/field"
)

// Plot colours: a short qualitative palette that stays readable in grey.
var palette = []color.Color{
	color.RGBA{0x1f, 0x4e, 0x8c, 0xff},
	color.RGBA{0xc8, 0x5a, 0x12, 0xff},
	color.RGBA{0x2a, 0x8a, 0x4a, 0xff},
	color.RGBA{0x8e, 0x2c, 0x6e, 0xff},
	color.RGBA{0x55, 0x55, 0x55, 0xff},
}

func xyOf(x, y []float64) plotter.XYs {
	var pts plotter.XYs
	for i := range x {
		if finite(x[i], y[i]) {
			pts = append(pts, plotter.XY{X: x[i], Y: y[i]})
		}
	}
	return pts
}

func addLine(p *plot.Plot, name string, pts plotter.XYs, c color.Color, points bool) error {
	if len(pts) == 0 {
		return nil
	}
	l, err := plotter.NewLine(pts)
	if err != nil {
		return err
	}
	l.Color = c
	l.Width = vg.Points(1.4)
	p.Add(l)
	if points {
		s, err := plotter.NewScatter(pts)
		if err != nil {
			return err
		}
		s.Color = c
		s.Radius = vg.Points(2)
		s.Shape = draw.CircleGlyph{}
		p.Add(s)
	}
	if name != "" {
		p.Legend.Add(name, l)
	}
	return nil
}

func savePlot(p *plot.Plot, path string) error {
	wt, err := p.WriterTo(6.4*vg.Inch, 4.2*vg.Inch, "png")
	if err != nil {
		return err
	}
	return field.WriteFileAtomic(path, 0o644, func(w io.Writer) error {
		_, err := wt.WriteTo(w)
		return err
	})
}

// WritePlots draws the curve plots into dir as PNG and returns their
// paths: stress_strain.png (with the modulus line, the offset line and
// the offset yield point, when computed), strain_history.png (every
// extensometer and gauge against time or frame), transverse_axial.png
// (when a transverse extensometer is set) and quality.png (mean ZNCC and
// tracked fraction per frame, incremental frames marked).
func WritePlots(dir string, c Curve, pr Properties) ([]string, error) {
	var paths []string
	save := func(p *plot.Plot, name string) error {
		path := filepath.Join(dir, name)
		if err := savePlot(p, path); err != nil {
			return fmt.Errorf("plot %s: %w", name, err)
		}
		paths = append(paths, path)
		return nil
	}
	pp := c.Params.withDefaults().Properties

	// Stress (or load) against axial strain.
	if pp.Axial != "" {
		ax := c.extColumn(pp.Axial)
		y, ylabel := c.Column("stress_MPa"), "engineering stress [MPa]"
		if len(xyOf(ax, y)) == 0 {
			y, ylabel = c.Column("load_N"), "load [N]"
		}
		if pts := xyOf(ax, y); len(pts) > 0 {
			p := plot.New()
			p.Title.Text = "Stress–strain (axial extensometer " + pp.Axial + ")"
			p.X.Label.Text = "axial engineering strain"
			p.Y.Label.Text = ylabel
			if err := addLine(p, "measured", pts, palette[0], true); err != nil {
				return paths, err
			}
			if m := pr.Modulus; m != nil && ylabel[0] == 'e' {
				fit := plotter.XYs{{X: m.Fit.XMin, Y: m.E*m.Fit.XMin + m.Fit.Intercept}, {X: m.Fit.XMax, Y: m.E*m.Fit.XMax + m.Fit.Intercept}}
				if err := addLine(p, fmt.Sprintf("modulus fit E = %.4g MPa", m.E), fit, palette[1], false); err != nil {
					return paths, err
				}
				if y := pr.Yield; y != nil {
					e0 := m.ToeStrain + y.Offset
					off := plotter.XYs{{X: e0, Y: 0}, {X: y.Strain + 0.25*(y.Strain-e0), Y: y.E * 1.25 * (y.Strain - e0)}}
					if err := addLine(p, fmt.Sprintf("%.3g %% offset line", 100*y.Offset), off, palette[2], false); err != nil {
						return paths, err
					}
					s, err := plotter.NewScatter(plotter.XYs{{X: y.Strain, Y: y.Stress}})
					if err != nil {
						return paths, err
					}
					s.Color, s.Radius, s.Shape = palette[3], vg.Points(4), draw.CrossGlyph{}
					p.Add(s)
					p.Legend.Add(fmt.Sprintf("offset yield %.4g MPa", y.Stress), s)
				}
			}
			p.Legend.Top, p.Legend.Left = false, false
			p.Add(plotter.NewGrid())
			if err := save(p, "stress_strain.png"); err != nil {
				return paths, err
			}
		}
	}

	// Strain history.
	xs, xlabel := c.Column("time_s"), "time [s]"
	for _, v := range xs {
		if !finite(v) {
			xs, xlabel = nil, "frame"
			break
		}
	}
	if xs == nil {
		xs = make([]float64, len(c.Rows))
		for i, r := range c.Rows {
			xs[i] = float64(r.Index)
		}
	}
	p := plot.New()
	p.Title.Text = "Strain history"
	p.X.Label.Text = xlabel
	p.Y.Label.Text = "strain"
	k := 0
	for _, e := range c.Params.Extensometers {
		if err := addLine(p, "ext "+e.Name+" (eng.)", xyOf(xs, c.Column("ext_"+e.Name+"_eng")), palette[k%len(palette)], true); err != nil {
			return paths, err
		}
		k++
	}
	for _, g := range c.Params.Gauges {
		for _, comp := range g.components() {
			if err := addLine(p, "gauge "+g.Name+" "+comp, xyOf(xs, c.Column("gauge_"+g.Name+"_"+comp+"_mean")), palette[k%len(palette)], false); err != nil {
				return paths, err
			}
			k++
		}
	}
	if k == 0 {
		for _, m := range []string{"E11", "E22"} {
			if err := addLine(p, "mean "+m, xyOf(xs, c.Column("mean_"+m)), palette[k%len(palette)], true); err != nil {
				return paths, err
			}
			k++
		}
	}
	p.Legend.Top, p.Legend.Left = true, true
	p.Add(plotter.NewGrid())
	if err := save(p, "strain_history.png"); err != nil {
		return paths, err
	}

	if pp.Axial != "" && pp.Transverse != "" {
		p := plot.New()
		p.Title.Text = "Transverse against axial strain"
		p.X.Label.Text = "axial engineering strain (" + pp.Axial + ")"
		p.Y.Label.Text = "transverse engineering strain (" + pp.Transverse + ")"
		if err := addLine(p, "", xyOf(c.extColumn(pp.Axial), c.extColumn(pp.Transverse)), palette[0], true); err != nil {
			return paths, err
		}
		p.Add(plotter.NewGrid())
		if err := save(p, "transverse_axial.png"); err != nil {
			return paths, err
		}
	}

	// Correlation quality.
	q := plot.New()
	q.Title.Text = "Correlation quality per frame"
	q.X.Label.Text = "frame"
	q.Y.Label.Text = "mean ZNCC, tracked fraction"
	idx := make([]float64, len(c.Rows))
	var inc plotter.XYs
	for i, r := range c.Rows {
		idx[i] = float64(r.Index)
		if r.Mode == ModeIncremental {
			inc = append(inc, plotter.XY{X: float64(r.Index), Y: r.MeanZNCC})
		}
	}
	if err := addLine(q, "mean ZNCC", xyOf(idx, c.Column("mean_zncc")), palette[0], true); err != nil {
		return paths, err
	}
	if err := addLine(q, "tracked fraction", xyOf(idx, c.Column("tracked_fraction")), palette[1], false); err != nil {
		return paths, err
	}
	if len(inc) > 0 {
		s, err := plotter.NewScatter(inc)
		if err != nil {
			return paths, err
		}
		s.Color, s.Radius, s.Shape = palette[3], vg.Points(4), draw.SquareGlyph{}
		q.Add(s)
		q.Legend.Add("incremental frames", s)
	}
	q.Legend.Top, q.Legend.Left = false, true
	q.Add(plotter.NewGrid())
	if err := save(q, "quality.png"); err != nil {
		return paths, err
	}
	return paths, nil
}

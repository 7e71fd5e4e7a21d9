package maps

import (
	"bytes"
	"errors"
	"fmt"
	"image"
	"image/color"
	"image/png"
	"math"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
)

// Style says how a series is drawn.
type Style int

// Series styles. The zero value draws a line.
const (
	StyleLine Style = iota
	StylePoints
	StyleLinePoints
)

// Series is a named set of (x, y) points of a curve plot. Pairs where
// either value is NaN or infinite are left out.
type Series struct {
	// Name is shown in the legend; "" leaves the series out of it.
	Name string
	// X and Y hold the points, of equal length.
	X, Y []float64
	// Style is line, points, or both.
	Style Style
	// Dashed draws the line dashed.
	Dashed bool
	// Color overrides the palette colour when not nil.
	Color color.Color
}

// Marker is a labelled point on a curve plot, such as an offset yield
// point.
type Marker struct {
	// Name is shown in the legend.
	Name string
	// X and Y place the marker in data coordinates.
	X, Y float64
}

// CurvePlot describes a line or scatter plot of several named series.
type CurvePlot struct {
	// Title is drawn above the plot.
	Title string
	// XLabel and YLabel name the axes; XUnit and YUnit, when set, are
	// appended in brackets (for example "engineering strain [%]").
	XLabel, YLabel string
	XUnit, YUnit   string
	// Series are drawn in order, each in its own colour from the
	// colour-blind-safe palette of Okabe & Ito 2008, "Color Universal
	// Design", cycling after eight.
	Series []Series
	// Markers are drawn over the series.
	Markers []Marker
	// LegendTop puts the legend at the top right instead of the bottom
	// right.
	LegendTop bool
	// Width and Height are the size of the PNG in pixels; 0 means 800×600.
	Width, Height int
}

// Validate reports every problem with the plot description at once.
func (p CurvePlot) Validate() error {
	var errs []error
	if len(p.Series) == 0 {
		errs = append(errs, errors.New("curve plot: no series; give at least one"))
	}
	points := 0
	for i, s := range p.Series {
		if len(s.X) != len(s.Y) {
			errs = append(errs, fmt.Errorf("curve plot series %d %q: %d x values but %d y values", i, s.Name, len(s.X), len(s.Y)))
			continue
		}
		if s.Style < StyleLine || s.Style > StyleLinePoints {
			errs = append(errs, fmt.Errorf("curve plot series %d %q: unknown style %d", i, s.Name, s.Style))
		}
		points += len(finiteXYs(s.X, s.Y))
	}
	if len(p.Series) > 0 && points == 0 {
		errs = append(errs, errors.New("curve plot: no finite (x, y) pair in any series"))
	}
	for i, m := range p.Markers {
		if !finite(m.X) || !finite(m.Y) {
			errs = append(errs, fmt.Errorf("curve plot marker %d %q at (%v, %v): want finite coordinates", i, m.Name, m.X, m.Y))
		}
	}
	for _, d := range []struct {
		name string
		v    int
	}{{"width", p.Width}, {"height", p.Height}} {
		if d.v != 0 && (d.v < 100 || d.v > 8000) {
			errs = append(errs, fmt.Errorf("curve plot %s %d px: want 100–8000, or 0 for the default", d.name, d.v))
		}
	}
	return errors.Join(errs...)
}

// okabeIto is the eight-colour palette of Okabe & Ito 2008, with black
// moved last (common practice).
var okabeIto = [...]color.RGBA{
	{0x00, 0x72, 0xb2, 0xff}, // blue
	{0xd5, 0x5e, 0x00, 0xff}, // vermillion
	{0x00, 0x9e, 0x73, 0xff}, // bluish green
	{0xe6, 0x9f, 0x00, 0xff}, // orange
	{0x56, 0xb4, 0xe9, 0xff}, // sky blue
	{0xcc, 0x79, 0xa7, 0xff}, // reddish purple
	{0xf0, 0xe4, 0x42, 0xff}, // yellow
	{0x00, 0x00, 0x00, 0xff}, // black
}

func finiteXYs(x, y []float64) plotter.XYs {
	var xy plotter.XYs
	for i := range x {
		if finite(x[i]) && finite(y[i]) {
			xy = append(xy, plotter.XY{X: x[i], Y: y[i]})
		}
	}
	return xy
}

func axisLabel(name, unit string) string {
	if unit == "" {
		return name
	}
	return name + " [" + unit + "]"
}

// PNG draws the plot with gonum/plot and returns it as PNG bytes of
// exactly Width×Height pixels (96 dpi). The output is deterministic.
func (p CurvePlot) PNG() ([]byte, error) {
	if err := p.Validate(); err != nil {
		return nil, err
	}
	w, h := p.Width, p.Height
	if w == 0 {
		w = 800
	}
	if h == 0 {
		h = 600
	}
	pl := plot.New()
	pl.Title.Text = p.Title
	pl.X.Label.Text = axisLabel(p.XLabel, p.XUnit)
	pl.Y.Label.Text = axisLabel(p.YLabel, p.YUnit)
	sans := func(size vg.Length) font.Font {
		return font.Font{Typeface: "Liberation", Variant: "Sans", Size: size}
	}
	pl.Title.TextStyle.Font = sans(13)
	pl.Title.Padding = vg.Points(6)
	for _, a := range []*plot.Axis{&pl.X, &pl.Y} {
		a.Label.TextStyle.Font = sans(11)
		a.Tick.Label.Font = sans(10)
	}
	pl.Legend.TextStyle.Font = sans(10)
	pl.Legend.Top = p.LegendTop
	pl.Legend.XOffs, pl.Legend.YOffs = -vg.Points(8), vg.Points(8)
	if p.LegendTop {
		pl.Legend.YOffs = -vg.Points(8)
	}
	pl.Add(plotter.NewGrid())
	for i, s := range p.Series {
		xy := finiteXYs(s.X, s.Y)
		if len(xy) == 0 {
			continue
		}
		var c color.Color = okabeIto[i%len(okabeIto)]
		if s.Color != nil {
			c = s.Color
		}
		var thumbs []plot.Thumbnailer
		if s.Style == StyleLine || s.Style == StyleLinePoints {
			l, err := plotter.NewLine(xy)
			if err != nil {
				return nil, fmt.Errorf("curve plot series %q: %w", s.Name, err)
			}
			l.Color, l.Width = c, vg.Points(1.5)
			if s.Dashed {
				l.Dashes = []vg.Length{vg.Points(6), vg.Points(4)}
			}
			pl.Add(l)
			thumbs = append(thumbs, l)
		}
		if s.Style == StylePoints || s.Style == StyleLinePoints {
			sc, err := plotter.NewScatter(xy)
			if err != nil {
				return nil, fmt.Errorf("curve plot series %q: %w", s.Name, err)
			}
			sc.Color, sc.Radius = c, vg.Points(2.5)
			sc.Shape = draw.GlyphDrawer(shapes[i%len(shapes)])
			pl.Add(sc)
			thumbs = append(thumbs, sc)
		}
		if s.Name != "" {
			pl.Legend.Add(s.Name, thumbs...)
		}
	}
	for _, m := range p.Markers {
		sc, err := plotter.NewScatter(plotter.XYs{{X: m.X, Y: m.Y}})
		if err != nil {
			return nil, fmt.Errorf("curve plot marker %q: %w", m.Name, err)
		}
		sc.Shape, sc.Radius, sc.Color = draw.CrossGlyph{}, vg.Points(5), color.Black
		pl.Add(sc)
		if m.Name != "" {
			pl.Legend.Add(m.Name, sc)
		}
	}
	img := image.NewRGBA(image.Rect(0, 0, w, h))
	c := vgimg.NewWith(vgimg.UseImage(img), vgimg.UseDPI(96))
	pl.Draw(draw.New(c))
	var b bytes.Buffer
	if err := png.Encode(&b, c.Image()); err != nil {
		return nil, fmt.Errorf("curve plot: encode PNG: %w", err)
	}
	return b.Bytes(), nil
}

var shapes = []draw.GlyphDrawer{draw.CircleGlyph{}, draw.SquareGlyph{}, draw.TriangleGlyph{}, draw.RingGlyph{}, draw.BoxGlyph{}, draw.PyramidGlyph{}}

// StressStrain describes a stress–strain curve with the lines of a modulus
// fit and an offset-yield construction, for StressStrain.Plot. The numbers
// come from the analysis (for example pkg/series); this type only draws
// them.
type StressStrain struct {
	// Title is drawn above the plot.
	Title string
	// Strain and Stress are the measured curve, of equal length.
	Strain, Stress []float64
	// StrainUnit and StressUnit label the axes; "" means "–" for strain
	// and "MPa" for stress.
	StrainUnit, StressUnit string
	// Modulus and Intercept define the fitted elastic line
	// stress = Modulus·strain + Intercept (stress units per strain unit);
	// Modulus 0 draws no fit line.
	Modulus, Intercept float64
	// FitRange is the strain range the modulus was fitted over, drawn as
	// the solid part of the fit line and named in the legend.
	FitRange [2]float64
	// Offset is the strain offset of the offset-yield line
	// stress = Modulus·(strain − Offset) + Intercept (0.002 for 0.2 % when
	// strain is dimensionless); 0 draws no offset line.
	Offset float64
	// Yield is the offset yield point (strain, stress); NaN in either, or
	// the zero value, leaves the marker out.
	Yield [2]float64
	// Width and Height are the PNG size in pixels; 0 means 800×600.
	Width, Height int
}

// Plot returns the curve plot: the measured curve, the fitted modulus line
// (solid over the fit range, dashed extended from zero stress to the
// largest stress), the offset line dashed over the same stresses, and the
// yield marker.
func (s StressStrain) Plot() CurvePlot {
	su, tu := s.StrainUnit, s.StressUnit
	if su == "" {
		su = "–"
	}
	if tu == "" {
		tu = "MPa"
	}
	p := CurvePlot{
		Title: s.Title, XLabel: "strain", XUnit: su, YLabel: "stress", YUnit: tu,
		Width: s.Width, Height: s.Height,
		Series: []Series{{Name: "measured", X: s.Strain, Y: s.Stress, Style: StyleLinePoints}},
	}
	top := math.Inf(-1)
	for _, v := range s.Stress {
		if finite(v) {
			top = math.Max(top, v)
		}
	}
	if s.Modulus != 0 && finite(s.Modulus) && finite(s.Intercept) && finite(top) {
		line := func(off float64) Series {
			e0 := off - s.Intercept/s.Modulus // zero stress
			e1 := off + (top-s.Intercept)/s.Modulus
			return Series{X: []float64{e0, e1}, Y: []float64{0, top}, Dashed: true}
		}
		ext := line(0)
		ext.Color = okabeIto[1]
		mod := formatNumber(s.Modulus) + " " + tu
		if tu == "MPa" && su == "–" && math.Abs(s.Modulus) >= 1000 {
			mod = formatNumber(s.Modulus/1000) + " GPa"
		}
		fit := Series{
			Name:  fmt.Sprintf("fit E = %s (strain %s to %s)", mod, formatNumber(s.FitRange[0]), formatNumber(s.FitRange[1])),
			X:     []float64{s.FitRange[0], s.FitRange[1]},
			Y:     []float64{s.Modulus*s.FitRange[0] + s.Intercept, s.Modulus*s.FitRange[1] + s.Intercept},
			Color: okabeIto[1],
		}
		p.Series = append(p.Series, fit, ext)
		if s.Offset != 0 && finite(s.Offset) {
			off := line(s.Offset)
			off.Name = fmt.Sprintf("offset line (%s)", formatNumber(s.Offset))
			off.Color = okabeIto[2]
			p.Series = append(p.Series, off)
		}
	}
	if finite(s.Yield[0]) && finite(s.Yield[1]) && s.Yield != [2]float64{} {
		p.Markers = append(p.Markers, Marker{Name: fmt.Sprintf("offset yield %s %s", formatNumber(s.Yield[1]), tu), X: s.Yield[0], Y: s.Yield[1]})
	}
	return p
}

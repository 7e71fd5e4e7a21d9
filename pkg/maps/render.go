package maps

import (
	"errors"
	"fmt"
	"image"
	"image/color"
	"math"
	"slices"

	"golang.org/x/image/draw"
	"golang.org/x/image/font"
	"gonum.org/v1/plot"

	"github.com/mottledic/mottle/pkg/imageio"
)

// Layer is a scalar field on a regular Nx×Ny grid of points, placed in
// image coordinates (pixel centres at integers, x right, y down).
type Layer struct {
	// Nx and Ny are the numbers of grid points along x and y.
	Nx, Ny int
	// X and Y hold the position of every point in the background image,
	// row-major (index j*Nx + i). Use the reference coordinates for a map
	// over the reference image, and the deformed positions x = X + u for a
	// map over the deformed image. Positions of invalid points are ignored
	// and may be NaN.
	X, Y []float64
	// Values holds one value per point, row-major; NaN marks an invalid
	// point.
	Values []float64
	// Step is the grid spacing in reference pixels, used to size vector
	// arrows; 0 means "estimate from the positions".
	Step float64
}

// Validate reports every problem with the layer at once.
func (l Layer) Validate() error {
	var errs []error
	if l.Nx < 1 || l.Ny < 1 {
		errs = append(errs, fmt.Errorf("layer grid: %d×%d points; want at least 1×1", l.Nx, l.Ny))
	}
	n := l.Nx * l.Ny
	for _, s := range []struct {
		name string
		v    []float64
	}{{"X", l.X}, {"Y", l.Y}, {"Values", l.Values}} {
		if len(s.v) != n {
			errs = append(errs, fmt.Errorf("layer %s: %d entries; want Nx*Ny = %d", s.name, len(s.v), n))
		}
	}
	if math.IsNaN(l.Step) || math.IsInf(l.Step, 0) || l.Step < 0 {
		errs = append(errs, fmt.Errorf("layer step %v: want a finite value ≥ 0 (0 = estimate)", l.Step))
	}
	if len(errs) == 0 {
		for k, v := range l.Values {
			if math.IsInf(v, 0) {
				errs = append(errs, fmt.Errorf("layer value %d is %v; mark invalid points with NaN", k, v))
				break
			}
			if !math.IsNaN(v) && !(finite(l.X[k]) && finite(l.Y[k])) {
				errs = append(errs, fmt.Errorf("layer point %d has a value but position (%v, %v); give a finite position or a NaN value", k, l.X[k], l.Y[k]))
				break
			}
		}
	}
	return errors.Join(errs...)
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// ScaleBar describes the scale bar under a picture.
type ScaleBar struct {
	// MMPerPx is the image scale; 0 draws the bar in pixels.
	MMPerPx float64
	// Length is the bar length in mm (or px when MMPerPx is 0); 0 picks
	// 1, 2 or 5 × 10^k near a fifth of the image width.
	Length float64
	// Hide leaves the scale bar out.
	Hide bool
}

func (s ScaleBar) validate() []error {
	var errs []error
	if !finite(s.MMPerPx) || s.MMPerPx < 0 {
		errs = append(errs, fmt.Errorf("scale bar mm per px %v: want a finite value ≥ 0 (0 = pixels)", s.MMPerPx))
	}
	if !finite(s.Length) || s.Length < 0 {
		errs = append(errs, fmt.Errorf("scale bar length %v: want a finite value ≥ 0 (0 = automatic)", s.Length))
	}
	return errs
}

// Options controls Render. The zero value is usable: default colour map
// for the quantity, robust automatic range, opaque colours, a scale bar in
// pixels, no width limit.
type Options struct {
	// Colormap names the colour map (see ByName); "" picks
	// ForQuantity(Quantity).
	Colormap string
	// Range is the value range [lo, hi] of the colour bar; values outside
	// take the end colours. The zero value [0, 0] means automatic: the 1st
	// to 99th percentile of the valid values, symmetric about zero for a
	// diverging map (see AutoRange).
	Range [2]float64
	// Opacity of the colours over the background, in (0, 1]; 0 means 1.
	Opacity float64
	// Quantity is the name of the quantity shown (for example "E11").
	Quantity string
	// Unit is the unit of the values (for example "mm"); "" for a
	// dimensionless quantity.
	Unit string
	// Title is drawn above the picture; "" uses Quantity.
	Title string
	// Note is an optional line drawn under the picture, for example the
	// virtual strain gauge size or a caution.
	Note string
	// ScaleBar describes the scale bar.
	ScaleBar ScaleBar
	// MaxWidth limits the width of the whole output image in pixels by
	// scaling the picture down; 0 means no limit.
	MaxWidth int
	// Steps fills every cell with the value of the grid point nearest in
	// the cell (sharp steps half-way between points) instead of
	// interpolating bilinearly, for quantities whose in-between values mean
	// nothing. Render and Overlay also do this, with the automatic range
	// [0, 1], for the quantities where Binary(Quantity) is true.
	Steps bool
	// Indexed draws an opaque map (Opacity 0 or 1) on a palette of 256
	// colours (Map.Indexed instead of Map.Image), which is drawn and
	// encoded to PNG several times faster than full colour. The precision
	// it gives up: the colour map in IndexedSteps steps (each value takes
	// the colour of the nearest step; the full-colour map interpolates the
	// colour map continuously), every grey (background image, text, paper)
	// on one of 65 levels, within 2 of the 256 levels of 8 bits. A map
	// with another opacity is drawn in full colour.
	Indexed bool
}

// IndexedSteps is the number of colours of the colour map in an indexed
// map (Options.Indexed): odd, so that a diverging map's neutral centre is
// one of them.
const IndexedSteps = 191

// indexedGreys is the number of grey levels of an indexed map's palette.
const indexedGreys = 256 - IndexedSteps

// steps reports whether the map is drawn as nearest-point steps.
func (o Options) steps() bool { return o.Steps || Binary(o.Quantity) }

// autoRange returns the automatic range of values for the options: [0, 1]
// for a binary quantity, else AutoRange.
func (o Options) autoRange(values []float64, symmetric bool) (lo, hi float64, err error) {
	if Binary(o.Quantity) {
		return 0, 1, nil
	}
	return AutoRange(values, symmetric)
}

// Validate reports every problem with the options at once.
func (o Options) Validate() error {
	var errs []error
	if o.Colormap != "" {
		if _, err := ByName(o.Colormap); err != nil {
			errs = append(errs, err)
		}
	}
	if o.Range != [2]float64{} && !(finite(o.Range[0]) && finite(o.Range[1]) && o.Range[0] < o.Range[1]) {
		errs = append(errs, fmt.Errorf("range [%v, %v]: want finite lo < hi, or [0, 0] for automatic", o.Range[0], o.Range[1]))
	}
	if !(o.Opacity >= 0 && o.Opacity <= 1) {
		errs = append(errs, fmt.Errorf("opacity %v: want a value in (0, 1], or 0 for the default 1", o.Opacity))
	}
	if o.MaxWidth < 0 {
		errs = append(errs, fmt.Errorf("max width %d: want ≥ 0 (0 = no limit)", o.MaxWidth))
	}
	errs = append(errs, o.ScaleBar.validate()...)
	return errors.Join(errs...)
}

func (o Options) colormap() Colormap {
	if o.Colormap == "" {
		return ForQuantity(o.Quantity)
	}
	c, _ := ByName(o.Colormap)
	return c
}

// Map is a rendered map and where its parts lie in the image.
type Map struct {
	// Image is the whole rendered map in full colour; nil when the map was
	// drawn indexed (Indexed).
	Image *image.RGBA
	// Indexed is the whole rendered map on a palette of 256 colours when
	// Options.Indexed drew it so; nil otherwise.
	Indexed *image.Paletted
	// Picture is the rectangle of Image holding the (scaled) background.
	Picture image.Rectangle
	// ScaleX and ScaleY are output pixels per image pixel along x and y.
	ScaleX, ScaleY float64
	// ColorBar is the rectangle of Image holding the colour gradient, with
	// Range[1] at the top and Range[0] at the bottom.
	ColorBar image.Rectangle
	// Range is the value range of the colour bar.
	Range [2]float64
	// AutoRange reports whether Range was chosen automatically.
	AutoRange bool
	// Colormap is the colour map used.
	Colormap Colormap
}

// Raster returns the rendered map: Indexed when it was drawn indexed,
// else Image.
func (m *Map) Raster() image.Image {
	if m.Indexed != nil {
		return m.Indexed
	}
	return m.Image
}

// ImagePoint returns the background-image coordinates of the centre of
// output pixel p (meaningful when p lies in Picture).
func (m *Map) ImagePoint(p image.Point) (x, y float64) {
	return (float64(p.X-m.Picture.Min.X)+0.5)/m.ScaleX - 0.5, (float64(p.Y-m.Picture.Min.Y)+0.5)/m.ScaleY - 0.5
}

// OutputPoint returns the output-pixel coordinates (in Image) of the
// background-image point (x, y).
func (m *Map) OutputPoint(x, y float64) (ox, oy float64) {
	return float64(m.Picture.Min.X) + (x+0.5)*m.ScaleX - 0.5, float64(m.Picture.Min.Y) + (y+0.5)*m.ScaleY - 0.5
}

// layout constants in output pixels.
const (
	pad      = 12
	barGap   = 20
	barWidth = 18
	tickLen  = 5
	minPicH  = 180
)

// Render draws the layer over the background image bg (nil for a plain
// grey background sized to the points): a greyscale picture, the field as
// colour interpolated bilinearly inside every grid cell whose four corners
// are valid (each cell is mapped to its quadrilateral of positions, so a
// layer placed at deformed positions fills the deformed cells), invalid
// areas left showing the background, a colour bar with ticks, unit and
// range, a scale bar and a title. The output is deterministic.
func Render(l Layer, bg *imageio.Gray, opt Options) (*Map, error) {
	if err := errors.Join(l.Validate(), opt.Validate(), checkGray(bg)); err != nil {
		return nil, fmt.Errorf("render map: %w", err)
	}
	cm := opt.colormap()
	lo, hi := opt.Range[0], opt.Range[1]
	auto := opt.Range == [2]float64{}
	if auto {
		var err error
		lo, hi, err = opt.autoRange(l.Values, cm.Diverging)
		if err != nil {
			return nil, fmt.Errorf("render map of %q: %w", opt.Quantity, err)
		}
	}
	if !finite(hi - lo) {
		return nil, fmt.Errorf("render map of %q: range [%v, %v] is too wide to draw; give a narrower range", opt.Quantity, lo, hi)
	}
	norm := Norm{Lo: lo, Hi: hi, Diverging: cm.Diverging}
	opacity := opt.Opacity
	if opacity == 0 {
		opacity = 1
	}
	face, err := newFace()
	if err != nil {
		return nil, err
	}
	defer face.Close()

	w, h := pictureSize(l.X, l.Y, l.Values, bg)
	if err := checkSize(w, h); err != nil {
		return nil, fmt.Errorf("render map: %w", err)
	}
	ticks := barTicks(lo, hi)
	header := opt.Quantity
	if opt.Unit != "" {
		header += " [" + opt.Unit + "]"
	}
	rangeKind := rangeNote(opt.Quantity, auto && !Binary(opt.Quantity), cm.Diverging)
	if auto && Binary(opt.Quantity) {
		rangeKind = "1 = yes, 0 = no"
	}
	rangeLine := formatNumber(lo) + " … " + formatNumber(hi)
	rightW := barWidth + tickLen + 4
	tw := 0
	for _, t := range ticks {
		tw = max(tw, textWidth(face, t.Label))
	}
	rightW = max(rightW+tw, textWidth(face, header), textWidth(face, rangeLine), textWidth(face, rangeKind))
	fixedW := pad + barGap + rightW + pad

	lay, err := newLayout(w, h, fixedW, opt.MaxWidth, face, opt.Title != "" || opt.Quantity != "")
	if err != nil {
		return nil, fmt.Errorf("render map: %w", err)
	}
	title := opt.Title
	if title == "" {
		title = opt.Quantity
	}
	textW := max(textWidth(face, title), textWidth(face, opt.Note))
	m := &Map{Picture: lay.pic, ScaleX: lay.sx, ScaleY: lay.sy, Range: [2]float64{lo, hi}, AutoRange: auto, Colormap: cm}
	var dst draw.Image
	// bar fills r with the colour of position t of the colour map.
	var bar func(r image.Rectangle, t float64)
	if opt.Indexed && opacity == 1 {
		pal := newIndexed(cm)
		m.Indexed = pal.canvas(lay.size(fixedW, textW, opt.MaxWidth))
		dst = greyDst{m.Indexed}
		pal.drawBackground(m.Indexed, lay, bg)
		pal.drawField(m.Indexed, lay.pic, rasterize(l, lay, opt.steps()), norm)
		bar = func(r image.Rectangle, t float64) { pal.fill(m.Indexed, r, pal.color(t)) }
	} else {
		m.Image = lay.canvas(fixedW, textW, opt.MaxWidth)
		dst = m.Image
		lay.drawBackground(m.Image, bg)
		// Field: values per output pixel, then colours, then composite.
		field := colorize(rasterize(l, lay, opt.steps()), lay.pic.Dx(), lay.pic.Dy(), cm, norm)
		draw.DrawMask(m.Image, lay.pic, field, image.Point{}, image.NewUniform(color.Alpha{A: uint8(math.Round(opacity * 255))}), image.Point{}, draw.Over)
		bar = func(r image.Rectangle, t float64) { fillRect(m.Image, r, cm.At(t)) }
	}

	// Title.
	lh, asc := lineHeight(face)
	if title != "" {
		drawText(dst, face, pad, pad+asc, title, ink)
	}

	// Colour bar: header, gradient, ticks, range.
	x0 := lay.pic.Max.X + barGap
	drawText(dst, face, x0, lay.pic.Min.Y+asc, header, ink)
	barTop := lay.pic.Min.Y + lh + 6
	barBot := lay.pic.Min.Y + lay.contentH - 2*lh - 8
	m.ColorBar = image.Rect(x0, barTop, x0+barWidth, barBot)
	bh := barBot - barTop
	for r := 0; r < bh; r++ {
		v := hi - (float64(r)+0.5)/float64(bh)*(hi-lo)
		bar(image.Rect(x0, barTop+r, x0+barWidth, barTop+r+1), norm.T(v))
	}
	strokeRect(dst, m.ColorBar, frame)
	for _, t := range ticks {
		y := barTop + int(math.Round((hi-t.Value)/(hi-lo)*float64(bh)))
		y = min(max(y, barTop), barBot-1)
		fillRect(dst, image.Rect(x0+barWidth+1, y, x0+barWidth+1+tickLen, y+1), ink)
		drawText(dst, face, x0+barWidth+tickLen+4, y+asc/2-1, t.Label, ink)
	}
	drawText(dst, face, x0, barBot+4+asc, rangeLine, ink)
	drawText(dst, face, x0, barBot+4+lh+asc, rangeKind, frame)

	lay.drawFooter(dst, face, opt.ScaleBar, w, opt.Note)
	return m, nil
}

// rangeNote is the line under the colour bar that says how its range was
// chosen. A symmetric automatic range names the quantity, so that "|u|"
// cannot be read as another quantity's magnitude.
func rangeNote(quantity string, auto, diverging bool) string {
	switch {
	case !auto:
		return "fixed range"
	case !diverging:
		return "auto: 1st–99th pct"
	case quantity == "":
		return "auto: ±99th pct of |value|"
	default:
		return "auto: ±99th pct of |" + quantity + "|"
	}
}

// layout places the picture and the text bands of an output image.
type layout struct {
	w, h     int             // background size in image pixels
	pic      image.Rectangle // picture in output pixels
	sx, sy   float64         // output px per image px
	contentH int             // height of the picture row (≥ picture height)
	footH    int             // height of the band under the picture row
	top      int
}

func newLayout(w, h, fixedW, maxWidth int, face font.Face, title bool) (*layout, error) {
	lh, _ := lineHeight(face)
	s := 1.0
	if maxWidth > 0 {
		avail := maxWidth - fixedW
		if avail < 16 {
			return nil, fmt.Errorf("max width %d px leaves %d px for the picture after %d px of labels; allow at least %d", maxWidth, avail, fixedW, fixedW+16)
		}
		s = math.Min(1, float64(avail)/float64(w))
	}
	pw := max(1, int(math.Round(float64(w)*s)))
	ph := max(1, int(math.Round(float64(h)*s)))
	top := pad
	if title {
		top += lh + 6
	}
	lay := &layout{w: w, h: h, sx: float64(pw) / float64(w), sy: float64(ph) / float64(h), top: top}
	lay.pic = image.Rect(pad, top, pad+pw, top+ph)
	lay.contentH = max(ph, minPicH, 4*lh+40)
	lay.footH = 2*lh + 16
	return lay, nil
}

// canvas returns the white output image.
// The width grows to fit text lines of width textW (title, note) up to
// maxWidth when that is set.
func (l *layout) canvas(fixedW, textW, maxWidth int) *image.RGBA {
	img := image.NewRGBA(l.size(fixedW, textW, maxWidth))
	fillRect(img, img.Bounds(), paper)
	return img
}

// size returns the bounds of the output image (see canvas).
func (l *layout) size(fixedW, textW, maxWidth int) image.Rectangle {
	W := max(l.pic.Max.X+fixedW-pad, pad+textW+pad)
	if maxWidth > 0 {
		W = min(W, max(maxWidth, l.pic.Max.X+fixedW-pad))
	}
	H := l.top + l.contentH + l.footH + pad
	return image.Rect(0, 0, W, H)
}

// drawBackground draws bg scaled into the picture rectangle (Catmull–Rom,
// golang.org/x/image/draw), or mid grey when bg is nil.
func (l *layout) drawBackground(dst *image.RGBA, bg *imageio.Gray) {
	if bg == nil {
		fillRect(dst, l.pic, color.Gray{Y: 128})
		return
	}
	g := grayToImage(bg)
	if l.pic.Dx() == g.Rect.Dx() && l.pic.Dy() == g.Rect.Dy() {
		draw.Draw(dst, l.pic, g, image.Point{}, draw.Src)
		return
	}
	draw.CatmullRom.Scale(dst, l.pic, g, g.Bounds(), draw.Src, nil)
}

// drawFooter draws the scale bar and the note under the picture row.
func (l *layout) drawFooter(dst draw.Image, face font.Face, sb ScaleBar, w int, note string) {
	lh, asc := lineHeight(face)
	y := l.top + l.contentH + 8
	if !sb.Hide {
		unit := "px"
		perPx := 1.0
		if sb.MMPerPx > 0 {
			unit, perPx = "mm", sb.MMPerPx
		}
		length := sb.Length
		if length == 0 {
			length = niceLength(0.2 * float64(w) * perPx)
		}
		px := int(math.Round(length / perPx * l.sx))
		x0 := l.pic.Min.X
		fillRect(dst, image.Rect(x0, y+asc/2-1, x0+px, y+asc/2+2), ink)
		fillRect(dst, image.Rect(x0, y, x0+1, y+asc), ink)
		fillRect(dst, image.Rect(x0+px-1, y, x0+px, y+asc), ink)
		drawText(dst, face, x0+px+6, y+asc-1, formatNumber(length)+" "+unit, ink)
	}
	if note != "" {
		drawText(dst, face, l.pic.Min.X, y+lh+4+asc, note, frame)
	}
}

// pictureSize returns the background size, or for no background the
// extent of the valid points plus one pixel (saturating far beyond the
// size limits).
func pictureSize(xs, ys, vals []float64, bg *imageio.Gray) (w, h int) {
	if bg != nil {
		return bg.W, bg.H
	}
	mx, my := 0.0, 0.0
	for k, v := range vals {
		if !math.IsNaN(v) {
			mx, my = math.Max(mx, xs[k]), math.Max(my, ys[k])
		}
	}
	const big = 1 << 30
	return int(math.Min(math.Ceil(mx), big)) + 1, int(math.Min(math.Ceil(my), big)) + 1
}

// Overlay returns the field alone as a w×h image at the resolution of the
// background image (one output pixel per image pixel): the colours of
// Render where the field is defined and fully transparent elsewhere, for
// layering in a viewer that sets its own opacity. Opacity, titles, scale
// bar and width limit in opt are ignored; the range and colour map are
// chosen as in Render and returned with the image.
func Overlay(l Layer, w, h int, opt Options) (img *image.NRGBA, lo, hi float64, err error) {
	if err := errors.Join(l.Validate(), opt.Validate()); err != nil {
		return nil, 0, 0, fmt.Errorf("overlay: %w", err)
	}
	if w < 1 || h < 1 {
		return nil, 0, 0, fmt.Errorf("overlay: size %d×%d; want a positive width and height", w, h)
	}
	if err := checkSize(w, h); err != nil {
		return nil, 0, 0, fmt.Errorf("overlay: %w", err)
	}
	cm := opt.colormap()
	lo, hi = opt.Range[0], opt.Range[1]
	if opt.Range == [2]float64{} {
		if lo, hi, err = opt.autoRange(l.Values, cm.Diverging); err != nil {
			return nil, 0, 0, fmt.Errorf("overlay of %q: %w", opt.Quantity, err)
		}
	}
	if !finite(hi - lo) {
		return nil, 0, 0, fmt.Errorf("overlay of %q: range [%v, %v] is too wide to draw; give a narrower range", opt.Quantity, lo, hi)
	}
	norm := Norm{Lo: lo, Hi: hi, Diverging: cm.Diverging}
	lay := &layout{w: w, h: h, sx: 1, sy: 1, pic: image.Rect(0, 0, w, h)}
	return colorize(rasterize(l, lay, opt.steps()), w, h, cm, norm), lo, hi, nil
}

// colorize turns per-pixel values (NaN = none) into colours, transparent
// where there is no value.
func colorize(vals []float64, w, h int, cm Colormap, norm Norm) *image.NRGBA {
	img := image.NewNRGBA(image.Rect(0, 0, w, h))
	for i, v := range vals {
		c := cm.At(norm.T(v))
		img.Pix[4*i], img.Pix[4*i+1], img.Pix[4*i+2], img.Pix[4*i+3] = c.R, c.G, c.B, c.A
	}
	return img
}

// MaxPictureSide and MaxPicturePixels bound the picture a map is drawn
// on, so that positions far outside any image cannot make a render run out
// of memory.
const (
	MaxPictureSide   = 1 << 15
	MaxPicturePixels = 1 << 27
)

func checkSize(w, h int) error {
	if w > MaxPictureSide || h > MaxPictureSide || w*h > MaxPicturePixels {
		return fmt.Errorf("picture %d×%d px exceeds the limit of %d px a side and %d pixels; check the point positions or pass the background image", w, h, MaxPictureSide, MaxPicturePixels)
	}
	return nil
}

// barTicks returns the labelled ticks of gonum/plot's default tick
// placement (Talbot, Lin & Hanrahan 2010, "An extension of Wilkinson's
// algorithm for positioning tick labels on axes") inside [lo, hi], with our
// number format.
func barTicks(lo, hi float64) []plot.Tick {
	var out []plot.Tick
	for _, t := range (plot.DefaultTicks{}).Ticks(lo, hi) {
		if t.Label == "" || t.Value < lo || t.Value > hi {
			continue
		}
		out = append(out, plot.Tick{Value: t.Value, Label: formatNumber(t.Value)})
	}
	return out
}

// rasterize returns the field value at the centre of every picture pixel
// (row-major, NaN outside the valid cells): interpolated bilinearly, or
// with steps the value of the nearest corner of the cell.
func rasterize(l Layer, lay *layout, steps bool) []float64 {
	pw, ph := lay.pic.Dx(), lay.pic.Dy()
	vals := make([]float64, pw*ph)
	for i := range vals {
		vals[i] = math.NaN()
	}
	ox := func(x float64) float64 { return (x+0.5)*lay.sx - 0.5 }
	oy := func(y float64) float64 { return (y+0.5)*lay.sy - 0.5 }
	for j := 0; j+1 < l.Ny; j++ {
		for i := 0; i+1 < l.Nx; i++ {
			k := [4]int{j*l.Nx + i, j*l.Nx + i + 1, (j+1)*l.Nx + i + 1, (j+1)*l.Nx + i}
			var q [4][2]float64
			var v [4]float64
			ok := true
			for c, kk := range k {
				v[c] = l.Values[kk]
				q[c] = [2]float64{ox(l.X[kk]), oy(l.Y[kk])}
				if math.IsNaN(v[c]) || !finite(q[c][0]) || !finite(q[c][1]) {
					ok = false
				}
			}
			if ok {
				fillCell(vals, pw, ph, q, v, steps)
			}
		}
	}
	return vals
}

// fillCell writes bilinearly interpolated values into the pixels whose
// centres lie in the quadrilateral q (corners in order (0,0), (1,0), (1,1),
// (0,1) of the cell's parameters), leaving pixels already written alone.
// With steps each pixel takes the value of the corner nearest in the
// cell's parameters (a, b), so values change in a sharp step half-way
// between grid points.
func fillCell(vals []float64, pw, ph int, q [4][2]float64, v [4]float64, steps bool) {
	xs := []float64{q[0][0], q[1][0], q[2][0], q[3][0]}
	ys := []float64{q[0][1], q[1][1], q[2][1], q[3][1]}
	x0 := max(0, int(math.Ceil(slices.Min(xs)-1e-9)))
	x1 := min(pw-1, int(math.Floor(slices.Max(xs)+1e-9)))
	y0 := max(0, int(math.Ceil(slices.Min(ys)-1e-9)))
	y1 := min(ph-1, int(math.Floor(slices.Max(ys)+1e-9)))
	// An axis-aligned rectangle (every cell of a map over the reference
	// image) inverts in closed form; other cells by Newton's method.
	rect := q[0][1] == q[1][1] && q[3][1] == q[2][1] && q[0][0] == q[3][0] && q[1][0] == q[2][0] &&
		q[1][0] > q[0][0] && q[3][1] > q[0][1]
	if rect && x1 >= x0 {
		fillRectCell(vals, pw, x0, x1, y0, y1, q, v, steps)
		return
	}
	for py := y0; py <= y1; py++ {
		for px := x0; px <= x1; px++ {
			idx := py*pw + px
			if !math.IsNaN(vals[idx]) {
				continue
			}
			var a, b float64
			ok := true
			if rect {
				a = math.Max(0, math.Min(1, (float64(px)-q[0][0])/(q[1][0]-q[0][0])))
				b = math.Max(0, math.Min(1, (float64(py)-q[0][1])/(q[3][1]-q[0][1])))
			} else {
				a, b, ok = inverseBilinear(q, float64(px), float64(py))
			}
			if !ok {
				continue
			}
			if steps {
				vals[idx] = v[[2][2]int{{0, 3}, {1, 2}}[int(math.Round(a))][int(math.Round(b))]]
				continue
			}
			vals[idx] = (1-a)*(1-b)*v[0] + a*(1-b)*v[1] + a*b*v[2] + (1-a)*b*v[3]
		}
	}
}

// fillRectCell is fillCell for an axis-aligned rectangular cell q over the
// pixels x0..x1, y0..y1: the same values, with each column's a and each
// row's b computed once.
func fillRectCell(vals []float64, pw, x0, x1, y0, y1 int, q [4][2]float64, v [4]float64, steps bool) {
	as := make([]float64, x1-x0+1)
	for px := x0; px <= x1; px++ {
		as[px-x0] = math.Max(0, math.Min(1, (float64(px)-q[0][0])/(q[1][0]-q[0][0])))
	}
	for py := y0; py <= y1; py++ {
		b := math.Max(0, math.Min(1, (float64(py)-q[0][1])/(q[3][1]-q[0][1])))
		row := vals[py*pw+x0 : py*pw+x1+1]
		for i, a := range as {
			if !math.IsNaN(row[i]) {
				continue
			}
			if steps {
				row[i] = v[[2][2]int{{0, 3}, {1, 2}}[int(math.Round(a))][int(math.Round(b))]]
				continue
			}
			row[i] = (1-a)*(1-b)*v[0] + a*(1-b)*v[1] + a*b*v[2] + (1-a)*b*v[3]
		}
	}
}

// inverseBilinear finds (a, b) in [0, 1]² with P(a, b) = (x, y) for the
// bilinear map of the quadrilateral q, by Newton's method (exact in one
// step for parallelograms). ok is false outside the cell or when the
// iteration fails (a folded cell).
func inverseBilinear(q [4][2]float64, x, y float64) (a, b float64, ok bool) {
	a, b = 0.5, 0.5
	const eps = 1e-9
	for it := 0; it < 20; it++ {
		var p, da, db [2]float64
		for d := 0; d < 2; d++ {
			p[d] = (1-a)*(1-b)*q[0][d] + a*(1-b)*q[1][d] + a*b*q[2][d] + (1-a)*b*q[3][d]
			da[d] = (1-b)*(q[1][d]-q[0][d]) + b*(q[2][d]-q[3][d])
			db[d] = (1-a)*(q[3][d]-q[0][d]) + a*(q[2][d]-q[1][d])
		}
		rx, ry := x-p[0], y-p[1]
		det := da[0]*db[1] - da[1]*db[0]
		if det == 0 || math.IsNaN(det) {
			return 0, 0, false
		}
		sa := (rx*db[1] - ry*db[0]) / det
		sb := (da[0]*ry - da[1]*rx) / det
		a, b = a+sa, b+sb
		if math.Abs(sa) < 1e-12 && math.Abs(sb) < 1e-12 {
			break
		}
	}
	if a < -eps || a > 1+eps || b < -eps || b > 1+eps {
		return 0, 0, false
	}
	// Confirm convergence.
	for d, t := range [2]float64{x, y} {
		p := (1-a)*(1-b)*q[0][d] + a*(1-b)*q[1][d] + a*b*q[2][d] + (1-a)*b*q[3][d]
		if math.Abs(p-t) > 1e-6 {
			return 0, 0, false
		}
	}
	return math.Max(0, math.Min(1, a)), math.Max(0, math.Min(1, b)), true
}

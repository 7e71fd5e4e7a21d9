package maps

import (
	"image"
	"image/color"
	"math"

	"golang.org/x/image/draw"

	"github.com/mottledic/mottle/pkg/imageio"
)

// indexed is the palette of an indexed map (Options.Indexed): indexedGreys
// evenly spaced greys from black to white, then IndexedSteps colours of the
// colour map at evenly spaced positions from 0 to 1.
type indexed struct {
	pal color.Palette
}

// newIndexed returns the palette of an indexed map in colour map cm.
func newIndexed(cm Colormap) *indexed {
	pal := make(color.Palette, 0, indexedGreys+IndexedSteps)
	for k := range indexedGreys {
		pal = append(pal, color.RGBA{R: greyLevel(k), G: greyLevel(k), B: greyLevel(k), A: 0xff})
	}
	for k := range IndexedSteps {
		pal = append(pal, cm.At(float64(k)/(IndexedSteps-1)))
	}
	return &indexed{pal: pal}
}

// greyLevel returns the 8-bit grey level of grey k of the palette.
func greyLevel(k int) uint8 {
	return uint8(math.Round(float64(k) * 255 / (indexedGreys - 1)))
}

// grey returns the index of the palette grey nearest to the 8-bit grey y.
func grey(y uint8) uint8 {
	return uint8(math.Round(float64(y) * (indexedGreys - 1) / 255))
}

// color returns the index of the colour map's step nearest to position t
// in [0, 1].
func (p *indexed) color(t float64) uint8 {
	return uint8(indexedGreys + int(math.Round(t*(IndexedSteps-1))))
}

// canvas returns a white indexed image with bounds r.
func (p *indexed) canvas(r image.Rectangle) *image.Paletted {
	img := image.NewPaletted(r, p.pal)
	p.fill(img, r, grey(0xff))
	return img
}

// fill sets the pixels of r in dst to palette index i.
func (p *indexed) fill(dst *image.Paletted, r image.Rectangle, i uint8) {
	r = r.Intersect(dst.Rect)
	for y := r.Min.Y; y < r.Max.Y; y++ {
		row := dst.Pix[dst.PixOffset(r.Min.X, y):dst.PixOffset(r.Max.X, y)]
		for x := range row {
			row[x] = i
		}
	}
}

// drawBackground draws bg into the picture rectangle of lay as the
// full-colour map does (layout.drawBackground), each pixel on the nearest
// palette grey.
func (p *indexed) drawBackground(dst *image.Paletted, lay *layout, bg *imageio.Gray) {
	if bg == nil {
		p.fill(dst, lay.pic, grey(128))
		return
	}
	g := grayToImage(bg)
	src, stride, off := g.Pix, g.Stride, 0
	if lay.pic.Dx() != g.Rect.Dx() || lay.pic.Dy() != g.Rect.Dy() {
		// Scaled as the full-colour map scales it (Catmull–Rom into RGBA);
		// the grey is its red channel.
		s := image.NewRGBA(image.Rect(0, 0, lay.pic.Dx(), lay.pic.Dy()))
		draw.CatmullRom.Scale(s, s.Rect, g, g.Bounds(), draw.Src, nil)
		src, stride = s.Pix, s.Stride
		off = 4
	}
	var lut [256]uint8
	for y := range lut {
		lut[y] = grey(uint8(y))
	}
	for y := 0; y < lay.pic.Dy(); y++ {
		row := dst.Pix[dst.PixOffset(lay.pic.Min.X, lay.pic.Min.Y+y):]
		in := src[y*stride:]
		if off == 0 {
			for x := 0; x < lay.pic.Dx(); x++ {
				row[x] = lut[in[x]]
			}
			continue
		}
		for x := 0; x < lay.pic.Dx(); x++ {
			row[x] = lut[in[off*x]]
		}
	}
}

// drawField sets the picture rectangle pic of dst, row-major values vals
// (NaN = no value, background left showing), to the colour-map steps of
// the values under norm.
func (p *indexed) drawField(dst *image.Paletted, pic image.Rectangle, vals []float64, norm Norm) {
	w := pic.Dx()
	for y := 0; y < pic.Dy(); y++ {
		row := dst.Pix[dst.PixOffset(pic.Min.X, pic.Min.Y+y):]
		for x, v := range vals[y*w : (y+1)*w] {
			if !math.IsNaN(v) {
				row[x] = p.color(norm.T(v))
			}
		}
	}
}

// greyDst is an indexed map as the text and line drawing sees it: a grey
// colour (the labels' ink blended over the paper) takes the nearest
// palette grey directly instead of a search through the whole palette;
// other colours are searched as image.Paletted does.
type greyDst struct{ *image.Paletted }

// Set implements draw.Image.
func (d greyDst) Set(x, y int, c color.Color) {
	d.SetRGBA64(x, y, color.RGBA64Model.Convert(c).(color.RGBA64))
}

// SetRGBA64 implements draw.RGBA64Image.
func (d greyDst) SetRGBA64(x, y int, c color.RGBA64) {
	if c.R == c.G && c.G == c.B && c.A == 0xffff {
		d.SetColorIndex(x, y, grey(uint8(c.R>>8)))
		return
	}
	d.Paletted.SetRGBA64(x, y, c)
}

package maps

import (
	"errors"
	"fmt"
	"image"
	"image/color"
	"math"
	"strconv"
	"strings"

	"golang.org/x/image/draw"
	"golang.org/x/image/font"
	"golang.org/x/image/font/gofont/goregular"
	"golang.org/x/image/font/opentype"
	"golang.org/x/image/math/fixed"
	"golang.org/x/image/vector"

	"github.com/mottledic/mottle/pkg/imageio"
)

// Drawing helpers shared by the map and vector renderers.

var (
	ink   = color.RGBA{R: 0x1a, G: 0x1a, B: 0x1a, A: 0xff}
	paper = color.RGBA{R: 0xff, G: 0xff, B: 0xff, A: 0xff}
	frame = color.RGBA{R: 0x55, G: 0x55, B: 0x55, A: 0xff}
)

// labelSize is the text size in pixels of every label.
const labelSize = 13

// newFace returns a fresh face of the Go Regular font (BSD licence, shipped
// with golang.org/x/image). Faces cache glyphs and are not safe for
// concurrent use, so every render makes its own.
func newFace() (font.Face, error) {
	f, err := opentype.Parse(goregular.TTF)
	if err != nil {
		return nil, fmt.Errorf("label font: %w", err)
	}
	face, err := opentype.NewFace(f, &opentype.FaceOptions{Size: labelSize, DPI: 72, Hinting: font.HintingFull})
	if err != nil {
		return nil, fmt.Errorf("label font: %w", err)
	}
	small, err := opentype.NewFace(f, &opentype.FaceOptions{Size: labelSize * superScale, DPI: 72, Hinting: font.HintingFull})
	if err != nil {
		return nil, fmt.Errorf("label font: %w", err)
	}
	return &superFace{Face: face, small: small, raise: fixed.I(int(math.Round(labelSize * superRaise)))}, nil
}

// Superscripts the label font lacks are drawn as their base letter, smaller
// and raised: superScale of the label size, raised by superRaise of it
// (common typesetting proportions). Go Regular has ², ³, ⁻ and ¹ but not
// ᵀ, which the transposes in quantity descriptions (FᵀF, F⁻ᵀ) use.
const (
	superScale = 0.7
	superRaise = 0.38
)

// superBase returns the letter a superscript letter raises.
func superBase(r rune) (rune, bool) {
	switch r {
	case 'ᵀ':
		return 'T', true
	case 'ᴴ':
		return 'H', true
	case 'ᵁ':
		return 'U', true
	case 'ᴵ':
		return 'I', true
	}
	return 0, false
}

// superFace is the label face, drawing the superscripts it has no glyph
// for (superscripts) with the smaller face, raised; every other rune is
// the label face's own.
type superFace struct {
	font.Face
	small font.Face
	raise fixed.Int26_6
}

// fallback returns the base letter of r when the label face lacks r.
func (f *superFace) fallback(r rune) (rune, bool) {
	b, ok := superBase(r)
	if !ok {
		return 0, false
	}
	if _, has := f.Face.GlyphAdvance(r); has {
		return 0, false
	}
	return b, true
}

// Glyph implements font.Face.
func (f *superFace) Glyph(dot fixed.Point26_6, r rune) (image.Rectangle, image.Image, image.Point, fixed.Int26_6, bool) {
	if b, ok := f.fallback(r); ok {
		return f.small.Glyph(fixed.Point26_6{X: dot.X, Y: dot.Y - f.raise}, b)
	}
	return f.Face.Glyph(dot, r)
}

// GlyphBounds implements font.Face.
func (f *superFace) GlyphBounds(r rune) (fixed.Rectangle26_6, fixed.Int26_6, bool) {
	if b, ok := f.fallback(r); ok {
		bounds, adv, ok := f.small.GlyphBounds(b)
		bounds.Min.Y -= f.raise
		bounds.Max.Y -= f.raise
		return bounds, adv, ok
	}
	return f.Face.GlyphBounds(r)
}

// GlyphAdvance implements font.Face.
func (f *superFace) GlyphAdvance(r rune) (fixed.Int26_6, bool) {
	if b, ok := f.fallback(r); ok {
		return f.small.GlyphAdvance(b)
	}
	return f.Face.GlyphAdvance(r)
}

// Kern implements font.Face; a raised letter is not kerned.
func (f *superFace) Kern(r0, r1 rune) fixed.Int26_6 {
	if _, ok := f.fallback(r0); ok {
		return 0
	}
	if _, ok := f.fallback(r1); ok {
		return 0
	}
	return f.Face.Kern(r0, r1)
}

// Close implements font.Face.
func (f *superFace) Close() error {
	return errors.Join(f.Face.Close(), f.small.Close())
}

// textWidth returns the advance width of s in whole pixels.
func textWidth(face font.Face, s string) int {
	return font.MeasureString(face, s).Ceil()
}

// lineHeight returns the distance between baselines in whole pixels and the ascent.
func lineHeight(face font.Face) (h, ascent int) {
	m := face.Metrics()
	return m.Height.Ceil(), m.Ascent.Ceil()
}

// drawText draws s with its baseline starting at (x, y).
func drawText(dst draw.Image, face font.Face, x, y int, s string, c color.Color) {
	d := font.Drawer{Dst: dst, Src: image.NewUniform(c), Face: face, Dot: fixed.P(x, y)}
	d.DrawString(s)
}

// fillRect fills r with c.
func fillRect(dst draw.Image, r image.Rectangle, c color.Color) {
	draw.Draw(dst, r, image.NewUniform(c), image.Point{}, draw.Src)
}

// strokeRect draws a 1-pixel outline just outside r.
func strokeRect(dst draw.Image, r image.Rectangle, c color.Color) {
	o := r.Inset(-1)
	fillRect(dst, image.Rect(o.Min.X, o.Min.Y, o.Max.X, o.Min.Y+1), c)
	fillRect(dst, image.Rect(o.Min.X, o.Max.Y-1, o.Max.X, o.Max.Y), c)
	fillRect(dst, image.Rect(o.Min.X, o.Min.Y, o.Min.X+1, o.Max.Y), c)
	fillRect(dst, image.Rect(o.Max.X-1, o.Min.Y, o.Max.X, o.Max.Y), c)
}

// fillPolygon fills the closed polygon pts (pixel coordinates, pixel
// centres at half-integers as in golang.org/x/image/vector) with c,
// anti-aliased, onto dst. Only the polygon's bounding box is rasterised.
func fillPolygon(dst *image.RGBA, pts [][2]float64, c color.Color) {
	if len(pts) < 3 {
		return
	}
	x0, y0, x1, y1 := math.Inf(1), math.Inf(1), math.Inf(-1), math.Inf(-1)
	for _, p := range pts {
		if !finite(p[0]) || !finite(p[1]) {
			return
		}
		x0, y0 = math.Min(x0, p[0]), math.Min(y0, p[1])
		x1, y1 = math.Max(x1, p[0]), math.Max(y1, p[1])
	}
	b := dst.Bounds()
	// Clip the box in float before converting, so far-away points cannot overflow.
	fx0 := math.Max(math.Floor(x0), float64(b.Min.X))
	fy0 := math.Max(math.Floor(y0), float64(b.Min.Y))
	fx1 := math.Min(math.Ceil(x1), float64(b.Max.X))
	fy1 := math.Min(math.Ceil(y1), float64(b.Max.Y))
	if fx1 <= fx0 || fy1 <= fy0 {
		return
	}
	box := image.Rect(int(fx0), int(fy0), int(fx1), int(fy1))
	r := vector.NewRasterizer(box.Dx(), box.Dy())
	r.DrawOp = draw.Over
	ox, oy := float64(box.Min.X), float64(box.Min.Y)
	r.MoveTo(float32(pts[0][0]-ox), float32(pts[0][1]-oy))
	for _, p := range pts[1:] {
		r.LineTo(float32(p[0]-ox), float32(p[1]-oy))
	}
	r.ClosePath()
	r.Draw(dst, box, image.NewUniform(c), image.Point{})
}

// grayToImage converts g to 8-bit grey: the native scale 0..2^Bits−1 when
// Bits is set, otherwise the image's own minimum..maximum.
func grayToImage(g *imageio.Gray) *image.Gray {
	out := image.NewGray(image.Rect(0, 0, g.W, g.H))
	lo, hi := 0.0, 255.0
	if g.Bits >= 1 && g.Bits <= 16 {
		hi = float64(uint32(1)<<g.Bits - 1)
	} else {
		lo, hi = math.Inf(1), math.Inf(-1)
		for y := 0; y < g.H; y++ {
			for _, v := range g.Pix[y*g.Stride : y*g.Stride+g.W] {
				if f := float64(v); !math.IsNaN(f) {
					lo, hi = math.Min(lo, f), math.Max(hi, f)
				}
			}
		}
		if !(hi > lo) {
			lo, hi = 0, math.Max(hi, 1)
		}
	}
	k := 255 / (hi - lo)
	for y := 0; y < g.H; y++ {
		row := g.Pix[y*g.Stride : y*g.Stride+g.W]
		for x, v := range row {
			if k == 1 && lo == 0 && v >= 0 && v <= 255 && v == float32(uint8(v)) {
				// An 8-bit level is its own grey (what the general
				// formula gives, without its float rounding).
				out.Pix[y*out.Stride+x] = uint8(v)
				continue
			}
			f := (float64(v) - lo) * k
			if math.IsNaN(f) {
				f = 0
			}
			out.Pix[y*out.Stride+x] = uint8(math.Round(math.Max(0, math.Min(255, f))))
		}
	}
	return out
}

// checkGray reports what is wrong with a background image, if anything.
func checkGray(g *imageio.Gray) error {
	if g == nil {
		return nil
	}
	if g.W <= 0 || g.H <= 0 {
		return fmt.Errorf("background image: size %d×%d; want a positive width and height", g.W, g.H)
	}
	if g.Stride < g.W || len(g.Pix) < (g.H-1)*g.Stride+g.W {
		return fmt.Errorf("background image: %d pixels with stride %d do not cover %d×%d", len(g.Pix), g.Stride, g.W, g.H)
	}
	return nil
}

// formatNumber formats v compactly for labels (up to 4 significant
// digits), with a true minus sign.
func formatNumber(v float64) string {
	if v == 0 {
		return "0"
	}
	s := strconv.FormatFloat(v, 'g', 4, 64)
	if strings.Contains(s, "e") {
		m, e, _ := strings.Cut(s, "e")
		n, _ := strconv.Atoi(e)
		s = m + "e" + strconv.Itoa(n)
	}
	return strings.ReplaceAll(s, "-", "−")
}

// niceLength returns the largest 1, 2 or 5 × 10^k not above x (x > 0).
func niceLength(x float64) float64 {
	p := math.Pow(10, math.Floor(math.Log10(x)))
	for _, m := range []float64{5, 2, 1} {
		if m*p <= x {
			return m * p
		}
	}
	return p
}

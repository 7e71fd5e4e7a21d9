package calib

import (
	"bufio"
	"fmt"
	"image"
	"io"
	"math"
)

// maxRaster bounds the pixels of a printed target raster.
const maxRaster = 1 << 27

// ink returns 1 where the printed sheet is dark at the sheet point (sx, sy)
// mm (from the top-left corner of the sheet), else 0.
func (t *Target) ink(sx, sy float64) bool {
	ox, oy := t.Origin()
	X, Y := sx-ox, sy-oy
	p := t.Pitch
	switch t.Kind {
	case Checkerboard:
		if X < 0 || Y < 0 || X >= float64(t.Cols)*p || Y >= float64(t.Rows)*p {
			return false
		}
		i, j := int(X/p), int(Y/p)
		if (i+j)%2 != 0 {
			return false
		}
		for _, m := range t.Marker {
			if m == [2]int{i, j} {
				dx, dy := X-(float64(i)+0.5)*p, Y-(float64(j)+0.5)*p
				if dx*dx+dy*dy < t.MarkerDiameter*t.MarkerDiameter/4 {
					return false
				}
			}
		}
		return true
	case Dots:
		i, j := int(math.Round(X/p)), int(math.Round(Y/p))
		if i < 0 || j < 0 || i >= t.Cols || j >= t.Rows {
			return false
		}
		d := t.Dot
		if t.isMarker(i, j) {
			d = t.MarkerDiameter
		}
		dx, dy := X-float64(i)*p, Y-float64(j)*p
		return dx*dx+dy*dy < d*d/4
	}
	return false
}

// Raster draws the printed sheet at dpi dots per inch: black ink on white,
// each pixel the ink coverage of its area (4×4 samples), so edges print at
// the right place. It returns an error if the raster would be too large.
func (t *Target) Raster(dpi float64) (*image.Gray, error) {
	if err := t.check(); err != nil {
		return nil, err
	}
	wmm, hmm := t.Size()
	if !(dpi >= 50 && dpi <= 4800) {
		return nil, fmt.Errorf("target resolution %g dpi: use 50–4800 dpi (300 or 600 for a laser printer)", dpi)
	}
	w, h := int(math.Ceil(wmm/25.4*dpi)), int(math.Ceil(hmm/25.4*dpi))
	if int64(w)*int64(h) > maxRaster {
		return nil, fmt.Errorf("target raster %d×%d px at %g dpi is over %d px: use a lower resolution or the SVG", w, h, dpi, maxRaster)
	}
	img := image.NewGray(image.Rect(0, 0, w, h))
	mm := 25.4 / dpi
	const n = 4
	for y := range h {
		for x := range w {
			c := 0
			for sy := range n {
				for sx := range n {
					if t.ink((float64(x)+(float64(sx)+0.5)/n)*mm, (float64(y)+(float64(sy)+0.5)/n)*mm) {
						c++
					}
				}
			}
			img.Pix[y*img.Stride+x] = uint8(255 - (255*c+n*n/2)/(n*n))
		}
	}
	return img, nil
}

// SVG writes the printed sheet as SVG in mm, with a caption in the margin
// naming the target and asking for a check of the printed scale.
func (t *Target) SVG(w io.Writer) error {
	if err := t.check(); err != nil {
		return err
	}
	b := bufio.NewWriter(w)
	wmm, hmm := t.Size()
	ox, oy := t.Origin()
	p := t.Pitch
	fmt.Fprintf(b, `<?xml version="1.0" encoding="UTF-8"?>
<svg xmlns="http://www.w3.org/2000/svg" width="%gmm" height="%gmm" viewBox="0 0 %g %g">
<rect x="0" y="0" width="%g" height="%g" fill="#fff"/>
<g fill="#000">
`, wmm, hmm, wmm, hmm, wmm, hmm)
	switch t.Kind {
	case Checkerboard:
		for j := range t.Rows {
			for i := range t.Cols {
				if (i+j)%2 == 0 {
					fmt.Fprintf(b, `<rect x="%g" y="%g" width="%g" height="%g"/>`+"\n", ox+float64(i)*p, oy+float64(j)*p, p, p)
				}
			}
		}
		b.WriteString("</g>\n<g fill=\"#fff\">\n")
		for _, m := range t.Marker {
			fmt.Fprintf(b, `<circle cx="%g" cy="%g" r="%g"/>`+"\n", ox+(float64(m[0])+0.5)*p, oy+(float64(m[1])+0.5)*p, t.MarkerDiameter/2)
		}
	case Dots:
		for j := range t.Rows {
			for i := range t.Cols {
				d := t.Dot
				if t.isMarker(i, j) {
					d = t.MarkerDiameter
				}
				fmt.Fprintf(b, `<circle cx="%g" cy="%g" r="%g"/>`+"\n", ox+float64(i)*p, oy+float64(j)*p, d/2)
			}
		}
	}
	b.WriteString("</g>\n")
	if t.Margin >= 4 {
		fs := math.Min(3, t.Margin/3)
		fmt.Fprintf(b, `<text x="%g" y="%g" font-family="sans-serif" font-size="%g" fill="#444">%s — check the printed pitch with a ruler before use</text>`+"\n",
			ox, hmm-t.Margin/2+fs/3, fs, t.Caption())
	}
	b.WriteString("</svg>\n")
	return b.Flush()
}

// Caption names the target in words, e.g. "Mottle checkerboard 9×7, 20 mm
// squares".
func (t *Target) Caption() string {
	if t.Kind == Dots {
		return fmt.Sprintf("Mottle dot grid %d×%d, %g mm pitch, %g mm dots", t.Cols, t.Rows, t.Pitch, t.Dot)
	}
	return fmt.Sprintf("Mottle checkerboard %d×%d, %g mm squares", t.Cols, t.Rows, t.Pitch)
}

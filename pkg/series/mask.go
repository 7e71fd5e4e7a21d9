package series

import (
	"bytes"
	"compress/flate"
	"fmt"
	"io"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/roi"
)

// packedMask is an ROI mask image saved with a State: its size and one bit
// per pixel (1 = inside), row-major, most significant bit first, deflated.
// ROI masks are large uniform areas, so this stays small.
type packedMask struct {
	W    int    `json:"w"`
	H    int    `json:"h"`
	Bits []byte `json:"bits_deflate"` // base64 in JSON
}

// packMask reads mask image g as roi.FromImage does and packs it.
func packMask(g *imageio.Gray, w, h int) (*packedMask, error) {
	m, err := roi.FromImage(g, w, h)
	if err != nil {
		return nil, fmt.Errorf("mask image: %w", err)
	}
	raw := make([]byte, (w*h+7)/8)
	for y := range h {
		for x := range w {
			if m.Inside(x, y) {
				k := y*w + x
				raw[k/8] |= 0x80 >> (k % 8)
			}
		}
	}
	var b bytes.Buffer
	zw, _ := flate.NewWriter(&b, flate.BestCompression) // the level is valid
	if _, err := zw.Write(raw); err != nil {
		return nil, fmt.Errorf("pack mask: %w", err)
	}
	if err := zw.Close(); err != nil {
		return nil, fmt.Errorf("pack mask: %w", err)
	}
	return &packedMask{W: w, H: h, Bits: b.Bytes()}, nil
}

// image unpacks the mask into an 8-bit image (255 inside, 0 outside) for
// a w×h reference; a different size is an error.
func (p *packedMask) image(w, h int) (*imageio.Gray, error) {
	if p.W != w || p.H != h {
		return nil, fmt.Errorf("the saved ROI mask is %d×%d px but the reference is %d×%d px; is it the same reference image?", p.W, p.H, w, h)
	}
	raw, err := io.ReadAll(io.LimitReader(flate.NewReader(bytes.NewReader(p.Bits)), int64((w*h+7)/8)+1))
	if err != nil {
		return nil, fmt.Errorf("saved ROI mask: %w", err)
	}
	if len(raw) != (w*h+7)/8 {
		return nil, fmt.Errorf("saved ROI mask holds %d bytes, want %d for %d×%d px", len(raw), (w*h+7)/8, w, h)
	}
	g := imageio.NewGray(w, h)
	g.Bits = 8
	for y := range h {
		for x := range w {
			if k := y*w + x; raw[k/8]&(0x80>>(k%8)) != 0 {
				g.Pix[y*g.Stride+x] = 255
			}
		}
	}
	return g, nil
}

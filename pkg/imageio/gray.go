// Package imageio decodes speckle images (PNG, TIFF, JPEG, BMP) into
// float32 grey-level images, with size and pixel limits checked from the
// header before any pixel is decoded.
package imageio

// Gray is a single-channel image of float32 grey levels. Pixel (x, y) is
// Pix[y*Stride+x], for 0 ≤ x < W and 0 ≤ y < H. Values are grey levels in
// the source's native scale: 0–255 for 8-bit, 0–65535 for 16-bit images.
type Gray struct {
	Pix    []float32
	Stride int
	W, H   int
	// Bits is the bit depth of the source samples (8, 12 or 16), or 0 when
	// the image was computed rather than decoded.
	Bits int
}

// NewGray returns a zeroed w×h image with Stride w.
func NewGray(w, h int) *Gray {
	return &Gray{Pix: make([]float32, w*h), Stride: w, W: w, H: h}
}

// At returns the grey level at (x, y). It panics if (x, y) is outside the image,
// like indexing a slice.
func (g *Gray) At(x, y int) float32 { return g.Pix[y*g.Stride+x] }

// Set sets the grey level at (x, y).
func (g *Gray) Set(x, y int, v float32) { g.Pix[y*g.Stride+x] = v }

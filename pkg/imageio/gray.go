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
	// Orientation is the EXIF orientation of the source file (camera
	// JPEGs; 0 when it carries none). Decode reads it and leaves the pixels
	// as stored; Orient applies it.
	Orientation Orientation
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

// Sub returns the w×h window of g whose top-left pixel is (x0, y0),
// sharing g's pixels. The window is clipped to g; it may be empty.
func (g *Gray) Sub(x0, y0, w, h int) *Gray {
	x1, y1 := min(x0+w, g.W), min(y0+h, g.H)
	x0, y0 = max(x0, 0), max(y0, 0)
	if x1 <= x0 || y1 <= y0 {
		return &Gray{Stride: g.Stride, Bits: g.Bits}
	}
	off := y0*g.Stride + x0
	end := (y1-1)*g.Stride + x1
	return &Gray{Pix: g.Pix[off:end:end], Stride: g.Stride, W: x1 - x0, H: y1 - y0, Bits: g.Bits}
}

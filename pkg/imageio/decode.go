package imageio

import (
	"bytes"
	"errors"
	"fmt"
	"image"
	"image/color"
	"io"
	"os"

	// Registered decoders.
	_ "image/jpeg"
	_ "image/png"

	_ "golang.org/x/image/bmp"
	_ "golang.org/x/image/tiff"
)

// Limits bound what Decode accepts. A zero field means "use the default".
type Limits struct {
	// MaxPixels is the largest accepted width×height. It is checked
	// against the header before any pixel is decoded, so a small file
	// that declares a huge image (a decompression bomb) is refused
	// without allocating it. Default 64 Mpx.
	MaxPixels int64
	// MaxBytes is the largest accepted encoded size in bytes. Default 1 GiB.
	MaxBytes int64
}

// Default limits.
const (
	DefaultMaxPixels = 64 << 20
	DefaultMaxBytes  = 1 << 30
)

// DefaultLimits returns the default limits: 64 Mpx and 1 GiB.
func DefaultLimits() Limits {
	return Limits{MaxPixels: DefaultMaxPixels, MaxBytes: DefaultMaxBytes}
}

func (l Limits) withDefaults() Limits {
	if l.MaxPixels <= 0 {
		l.MaxPixels = DefaultMaxPixels
	}
	if l.MaxBytes <= 0 {
		l.MaxBytes = DefaultMaxBytes
	}
	return l
}

// countingReader reads at most max+1 bytes and remembers whether the
// source held more than max.
type countingReader struct {
	r   io.Reader
	n   int64
	max int64
}

// Read reads from the source, stopping one byte past the limit.
func (c *countingReader) Read(p []byte) (int, error) {
	if c.over() {
		return 0, c.err()
	}
	if rest := c.max + 1 - c.n; int64(len(p)) > rest {
		p = p[:rest]
	}
	n, err := c.r.Read(p)
	c.n += int64(n)
	return n, err
}

func (c *countingReader) over() bool { return c.n > c.max }

func (c *countingReader) err() error {
	return fmt.Errorf("%w: file exceeds the limit of %d bytes", ErrTooLarge, c.max)
}

// magic lists the signatures of the formats Decode accepts.
var magic = []struct{ format, sig string }{
	{"png", "\x89PNG\r\n\x1a\n"},
	{"jpeg", "\xff\xd8"},
	{"tiff", "II*\x00"},
	{"tiff", "MM\x00*"},
	{"bmp", "BM"},
}

// sniff returns the format whose signature starts head, or "".
func sniff(head []byte) string {
	for _, m := range magic {
		if bytes.HasPrefix(head, []byte(m.sig)) {
			return m.format
		}
	}
	return ""
}

// Decode reads a PNG, TIFF, JPEG, BMP or binary PGM (Netpbm P5, see
// WritePGM) image from r and returns its luminance as a Gray image in the
// native grey scale of the source (0–255 for 8-bit sources, 0–65535 for
// 16-bit ones; Bits is set to 8 or 16). PGM decodes fastest (no
// compression, no conversion).
//
// The header is read first: an image with more than lim.MaxPixels pixels
// is refused with ErrTooLarge before its pixels are decoded. Colour is
// converted to luma with the ITU-R BT.601 weights Y = 0.299 R + 0.587 G +
// 0.114 B applied to the stored (gamma-encoded) values, the same weights
// JPEG (JFIF) uses, so for a JPEG the Y channel is taken directly. Alpha is
// ignored. 16-bit samples keep their full precision (float32 holds every
// integer up to 2²⁴ exactly).
//
// A JPEG's EXIF orientation is read into Gray.Orientation; the pixels are
// left as stored (see Orient), so that every frame of a series can be
// turned by the orientation of its reference.
//
// Errors wrap ErrFormat (not an image format Mottle reads), ErrCorrupt
// (truncated or damaged data), ErrTooLarge or ErrTooSmall (empty image).
func Decode(r io.Reader, lim Limits) (*Gray, error) {
	lim = lim.withDefaults()
	cr := &countingReader{r: r, max: lim.MaxBytes}
	var head bytes.Buffer
	sig := make([]byte, 8)
	n, _ := io.ReadFull(cr, sig)
	head.Write(sig[:n])
	if cr.over() {
		return nil, cr.err()
	}
	if n == 0 {
		return nil, fmt.Errorf("%w: the file is empty (0 bytes); give a PNG, TIFF, JPEG or BMP image", ErrFormat)
	}
	if isPGM(sig[:n]) {
		g, err := decodePGM(io.MultiReader(bytes.NewReader(sig[:n]), cr), lim)
		if cr.over() {
			return nil, cr.err()
		}
		return g, err
	}
	format := sniff(sig[:n])
	if format == "" {
		return nil, fmt.Errorf("%w: the data does not start like PNG, TIFF, JPEG, BMP or PGM", ErrFormat)
	}
	cfg, _, err := image.DecodeConfig(io.MultiReader(bytes.NewReader(sig[:n]), io.TeeReader(cr, &head)))
	if cr.over() {
		return nil, cr.err()
	}
	if err != nil {
		return nil, decodeErr(err, format+" header")
	}
	if cfg.Width <= 0 || cfg.Height <= 0 {
		return nil, fmt.Errorf("%w: %s header declares %d×%d px", ErrTooSmall, format, cfg.Width, cfg.Height)
	}
	if px := int64(cfg.Width) * int64(cfg.Height); px > lim.MaxPixels {
		return nil, fmt.Errorf("%w: %s header declares %d×%d = %d px, over the limit of %d px; "+
			"crop or bin the image, or raise the pixel limit", ErrTooLarge, format, cfg.Width, cfg.Height, px, lim.MaxPixels)
	}
	var orient Orientation
	if format == "jpeg" {
		// DecodeConfig read the marker segments up to the frame header,
		// which is where a camera puts its APP1 EXIF segment.
		orient = exifOrientation(head.Bytes())
	}
	img, _, err := image.Decode(io.MultiReader(&head, cr))
	if cr.over() {
		return nil, cr.err()
	}
	if err != nil {
		return nil, decodeErr(err, format)
	}
	b := img.Bounds()
	if b.Dx() != cfg.Width || b.Dy() != cfg.Height {
		return nil, fmt.Errorf("%w: %s header declares %d×%d px but the data holds %d×%d",
			ErrCorrupt, format, cfg.Width, cfg.Height, b.Dx(), b.Dy())
	}
	g := FromImage(img)
	g.Orientation = orient
	return g, nil
}

func decodeErr(err error, what string) error {
	switch {
	case errors.Is(err, image.ErrFormat):
		return fmt.Errorf("%w: not PNG, TIFF, JPEG or BMP", ErrFormat)
	case errors.Is(err, io.ErrUnexpectedEOF), errors.Is(err, io.EOF):
		return fmt.Errorf("%w: %s: file ends early (%v)", ErrCorrupt, what, err)
	default:
		return fmt.Errorf("%w: %s: %v", ErrCorrupt, what, err)
	}
}

// ReadFile decodes the image file at path; see Decode. Errors name the file.
func ReadFile(path string, lim Limits) (*Gray, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("image %q: %w", path, err)
	}
	defer f.Close()
	if st, err := f.Stat(); err == nil && st.IsDir() {
		return nil, fmt.Errorf("image %q: %w: it is a folder; give an image file (PNG, TIFF, JPEG or BMP) inside it", path, ErrFormat)
	}
	g, err := Decode(f, lim)
	if err != nil {
		return nil, fmt.Errorf("image %q: %w", path, err)
	}
	return g, nil
}

// BT.601 luma weights (ITU-R BT.601; also JFIF, the JPEG file format).
const (
	lumaR = 0.299
	lumaG = 0.587
	lumaB = 0.114
)

// FromImage converts any image.Image to a Gray of luminance; see Decode
// for the conversion. Bits is 16 for 16-bit sample types (Gray16, RGBA64,
// NRGBA64) and 8 otherwise.
func FromImage(img image.Image) *Gray {
	b := img.Bounds()
	w, h := b.Dx(), b.Dy()
	g := NewGray(w, h)
	g.Bits = 8
	switch m := img.(type) {
	case *image.Gray:
		for y := 0; y < h; y++ {
			o := m.PixOffset(b.Min.X, b.Min.Y+y)
			row := m.Pix[o : o+w]
			out := g.Pix[y*g.Stride : y*g.Stride+w]
			for x, v := range row {
				out[x] = float32(v)
			}
		}
	case *image.Gray16:
		g.Bits = 16
		for y := 0; y < h; y++ {
			o := m.PixOffset(b.Min.X, b.Min.Y+y)
			row := m.Pix[o : o+2*w]
			out := g.Pix[y*g.Stride : y*g.Stride+w]
			for x := range out {
				out[x] = float32(uint16(row[2*x])<<8 | uint16(row[2*x+1]))
			}
		}
	case *image.YCbCr:
		for y := 0; y < h; y++ {
			out := g.Pix[y*g.Stride : y*g.Stride+w]
			for x := range out {
				out[x] = float32(m.Y[m.YOffset(b.Min.X+x, b.Min.Y+y)])
			}
		}
	case *image.NRGBA:
		for y := 0; y < h; y++ {
			o := m.PixOffset(b.Min.X, b.Min.Y+y)
			row := m.Pix[o : o+4*w]
			out := g.Pix[y*g.Stride : y*g.Stride+w]
			for x := range out {
				out[x] = float32(lumaR*float64(row[4*x]) + lumaG*float64(row[4*x+1]) + lumaB*float64(row[4*x+2]))
			}
		}
	default:
		scale := 1.0 / 257
		switch img.(type) {
		case *image.Gray16, *image.RGBA64, *image.NRGBA64:
			g.Bits = 16
			scale = 1
		}
		for y := 0; y < h; y++ {
			out := g.Pix[y*g.Stride : y*g.Stride+w]
			for x := range out {
				c := color.NRGBA64Model.Convert(img.At(b.Min.X+x, b.Min.Y+y)).(color.NRGBA64)
				if c.R == c.G && c.G == c.B {
					out[x] = float32(float64(c.R) * scale)
					continue
				}
				out[x] = float32((lumaR*float64(c.R) + lumaG*float64(c.G) + lumaB*float64(c.B)) * scale)
			}
		}
	}
	return g
}

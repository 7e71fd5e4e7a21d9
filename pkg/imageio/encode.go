package imageio

import (
	"fmt"
	"image"
	"image/png"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"

	"golang.org/x/image/tiff"
)

// MaxLevel returns the largest grey level of a bits-deep integer image,
// 2^bits − 1, or an error wrapping ErrBits unless bits is 8, 12 or 16.
func MaxLevel(bits int) (float64, error) {
	switch bits {
	case 8, 12, 16:
		return float64(int(1)<<bits - 1), nil
	}
	return 0, fmt.Errorf("%w: %d bits; use 8, 12 or 16", ErrBits, bits)
}

// Quantize rounds every grey level of g to the nearest integer (halves
// away from zero) and clips it to [0, 2^bits − 1], in place, and sets
// g.Bits. bits must be 8, 12 or 16. Values are not rescaled: a 12-bit image
// keeps levels 0–4095.
func Quantize(g *Gray, bits int) error {
	max, err := MaxLevel(bits)
	if err != nil {
		return err
	}
	for y := 0; y < g.H; y++ {
		row := g.Pix[y*g.Stride : y*g.Stride+g.W]
		for x, v := range row {
			row[x] = float32(clipRound(float64(v), max))
		}
	}
	g.Bits = bits
	return nil
}

func clipRound(v, max float64) float64 {
	if !(v > 0) { // also NaN
		return 0
	}
	if v >= max {
		return max
	}
	return math.Round(v)
}

// ToImage converts g to an *image.Gray (bits 8) or *image.Gray16 (bits 12
// or 16). Grey levels are written unchanged, only rounded and clipped to
// [0, 2^bits − 1]: they are not rescaled. A 12-bit image is therefore
// stored in a 16-bit container with levels 0–4095 (the layout most
// machine-vision cameras use), and reads back with Bits = 16 and the same
// levels.
func ToImage(g *Gray, bits int) (image.Image, error) {
	max, err := MaxLevel(bits)
	if err != nil {
		return nil, err
	}
	r := image.Rect(0, 0, g.W, g.H)
	if bits == 8 {
		m := image.NewGray(r)
		for y := 0; y < g.H; y++ {
			row := g.Pix[y*g.Stride : y*g.Stride+g.W]
			out := m.Pix[y*m.Stride : y*m.Stride+g.W]
			for x, v := range row {
				out[x] = uint8(clipRound(float64(v), max))
			}
		}
		return m, nil
	}
	m := image.NewGray16(r)
	for y := 0; y < g.H; y++ {
		row := g.Pix[y*g.Stride : y*g.Stride+g.W]
		out := m.Pix[y*m.Stride : y*m.Stride+2*g.W]
		for x, v := range row {
			q := uint16(clipRound(float64(v), max))
			out[2*x] = uint8(q >> 8)
			out[2*x+1] = uint8(q)
		}
	}
	return m, nil
}

// WritePNG encodes g as a greyscale PNG with 8-bit samples (bits 8) or
// 16-bit samples (bits 12 or 16); see ToImage for the level mapping.
func WritePNG(w io.Writer, g *Gray, bits int) error {
	m, err := ToImage(g, bits)
	if err != nil {
		return err
	}
	// The fastest level: the same pixels, a little larger, written in a
	// fraction of the default level's time.
	enc := png.Encoder{CompressionLevel: png.BestSpeed}
	return enc.Encode(w, m)
}

// WriteTIFF encodes g as an uncompressed greyscale TIFF with 8-bit or
// 16-bit samples; see ToImage for the level mapping.
func WriteTIFF(w io.Writer, g *Gray, bits int) error {
	m, err := ToImage(g, bits)
	if err != nil {
		return err
	}
	return tiff.Encode(w, m, &tiff.Options{Compression: tiff.Uncompressed})
}

// WriteFile writes g to path as PNG (.png) or TIFF (.tif, .tiff), chosen by
// the extension, with the given bit depth. The file is written to a
// temporary file in the same directory and renamed into place, so a reader
// never sees a half-written image.
func WriteFile(path string, g *Gray, bits int) error {
	var enc func(io.Writer, *Gray, int) error
	switch strings.ToLower(filepath.Ext(path)) {
	case ".png":
		enc = WritePNG
	case ".tif", ".tiff":
		enc = WriteTIFF
	default:
		return fmt.Errorf("image %q: %w: extension %q; use .png, .tif or .tiff", path, ErrFormat, filepath.Ext(path))
	}
	if _, err := MaxLevel(bits); err != nil {
		return fmt.Errorf("image %q: %w", path, err)
	}
	f, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".tmp*")
	if err != nil {
		return fmt.Errorf("image %q: %w", path, err)
	}
	tmp := f.Name()
	err = f.Chmod(0o644)
	if err == nil {
		err = enc(f, g, bits)
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = os.Rename(tmp, path)
	}
	if err != nil {
		os.Remove(tmp)
		return fmt.Errorf("image %q: %w", path, err)
	}
	return nil
}

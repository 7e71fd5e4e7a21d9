package maps

import (
	"bytes"
	"fmt"
	"image"
	"image/png"
	"io"
)

// EncodePNG returns img encoded as PNG (the fastest compression level; the
// bytes are the same for the same image).
func EncodePNG(img image.Image) ([]byte, error) {
	var b bytes.Buffer
	if err := WritePNG(&b, img); err != nil {
		return nil, err
	}
	return b.Bytes(), nil
}

// WritePNG writes img to w as PNG at the fastest compression level.
func WritePNG(w io.Writer, img image.Image) error {
	if img == nil {
		return fmt.Errorf("encode PNG: nil image")
	}
	enc := png.Encoder{CompressionLevel: png.BestSpeed}
	if err := enc.Encode(w, img); err != nil {
		return fmt.Errorf("encode PNG: %w", err)
	}
	return nil
}

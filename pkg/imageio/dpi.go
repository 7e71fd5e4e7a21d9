package imageio

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"hash/crc32"
	"image"
	"image/png"
	"io"
	"math"
)

// WritePNGDPI encodes img as PNG with its print resolution: a pHYs chunk
// (PNG specification, ISO/IEC 15948, §11.3.5.3) giving dpi dots per inch
// (stored in dots per metre), so a printer or viewer reproduces the
// physical size. It returns an error for a resolution outside 1–100000 dpi.
func WritePNGDPI(w io.Writer, img image.Image, dpi float64) error {
	if !(dpi >= 1 && dpi <= 100000) {
		return fmt.Errorf("png resolution %g dpi: use 1–100000 dpi", dpi)
	}
	var buf bytes.Buffer
	if err := png.Encode(&buf, img); err != nil {
		return fmt.Errorf("encode png: %w", err)
	}
	b := buf.Bytes()
	// Signature (8 bytes), then IHDR: length 13, type, data, CRC = 25 bytes.
	const ihdrEnd = 8 + 25
	if len(b) < ihdrEnd || string(b[12:16]) != "IHDR" {
		return errors.New("encode png: unexpected encoder output")
	}
	ppm := uint32(math.Round(dpi / 0.0254))
	chunk := make([]byte, 0, 21)
	chunk = binary.BigEndian.AppendUint32(chunk, 9)
	chunk = append(chunk, "pHYs"...)
	chunk = binary.BigEndian.AppendUint32(chunk, ppm)
	chunk = binary.BigEndian.AppendUint32(chunk, ppm)
	chunk = append(chunk, 1) // unit: metre
	chunk = binary.BigEndian.AppendUint32(chunk, crc32.ChecksumIEEE(chunk[4:]))
	for _, part := range [][]byte{b[:ihdrEnd], chunk, b[ihdrEnd:]} {
		if _, err := w.Write(part); err != nil {
			return fmt.Errorf("write png: %w", err)
		}
	}
	return nil
}

// PNGDPI returns the print resolution recorded in a PNG's pHYs chunk, in
// dots per inch (horizontal), or an error if the file has none.
func PNGDPI(b []byte) (float64, error) {
	if len(b) < 8 || string(b[1:4]) != "PNG" {
		return 0, errors.New("not a PNG file")
	}
	for p := 8; p+12 <= len(b); {
		n := int(binary.BigEndian.Uint32(b[p:]))
		typ := string(b[p+4 : p+8])
		if p+12+n > len(b) {
			break
		}
		if typ == "pHYs" && n == 9 {
			d := b[p+8:]
			if d[8] != 1 {
				return 0, errors.New("png pHYs chunk has no unit (aspect ratio only)")
			}
			return float64(binary.BigEndian.Uint32(d)) * 0.0254, nil
		}
		if typ == "IDAT" {
			break
		}
		p += 12 + n
	}
	return 0, errors.New("png has no pHYs chunk (no print resolution)")
}

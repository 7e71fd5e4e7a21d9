package verify

import (
	"bufio"
	"encoding/binary"
	"fmt"
	"math"
	"os"
	"strings"

	"github.com/mottledic/mottle/pkg/imageio"
)

// WriteNPY writes g to path as a NumPy .npy file (format version 1.0) of
// little-endian float32 with shape (H, W) in C order, so that the reference
// drivers read exactly the grey levels Mottle sees. The format is the one
// described in NumPy's documentation, "A simple file format for NumPy
// arrays" (NEP 1).
func WriteNPY(path string, g *imageio.Gray) error {
	if g == nil || g.W <= 0 || g.H <= 0 || g.Stride < g.W || len(g.Pix) < (g.H-1)*g.Stride+g.W {
		return fmt.Errorf("write %s: image is empty or its Pix/Stride do not match W×H", path)
	}
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("write npy: %w", err)
	}
	w := bufio.NewWriter(f)
	dict := fmt.Sprintf("{'descr': '<f4', 'fortran_order': False, 'shape': (%d, %d), }", g.H, g.W)
	// Magic (6) + version (2) + header length (2) + dict, padded with
	// spaces and ended by '\n' to a multiple of 64 bytes.
	total := 10 + len(dict) + 1
	pad := (64 - total%64) % 64
	hdr := dict + strings.Repeat(" ", pad) + "\n"
	w.WriteString("\x93NUMPY\x01\x00")
	binary.Write(w, binary.LittleEndian, uint16(len(hdr)))
	w.WriteString(hdr)
	buf := make([]byte, 4*g.W)
	for y := 0; y < g.H; y++ {
		row := g.Pix[y*g.Stride : y*g.Stride+g.W]
		for x, v := range row {
			binary.LittleEndian.PutUint32(buf[4*x:], math.Float32bits(v))
		}
		w.Write(buf)
	}
	if err := w.Flush(); err != nil {
		f.Close()
		return fmt.Errorf("write %s: %w", path, err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	return nil
}

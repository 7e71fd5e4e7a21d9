package imageio

import (
	"bufio"
	"fmt"
	"io"
	"strconv"
)

// PGM is the binary greymap of the Netpbm formats ("P5"): a short text
// header, "P5", the width, the height and the largest sample value
// (maxval, 1–65535), separated by whitespace ("#" starts a comment that
// runs to the end of the line), one whitespace character, then the
// samples row by row, one byte each when maxval < 256 and two bytes, most
// significant first, otherwise. It has no compression, so it decodes at
// the speed of a memory copy: the upload format for frames whose answer
// is awaited (live gauges).

// isPGM reports whether head starts a binary PGM: "P5" and whitespace.
func isPGM(head []byte) bool {
	return len(head) >= 3 && head[0] == 'P' && head[1] == '5' && isSpace(head[2])
}

func isSpace(c byte) bool {
	return c == ' ' || c == '\t' || c == '\n' || c == '\r' || c == '\v' || c == '\f'
}

// decodePGM reads a binary PGM from r (positioned at its "P5"), refusing
// more than lim.MaxPixels pixels from the header. 8-bit files give Bits 8,
// the others Bits 16, with the samples as stored (a 12-bit camera's
// levels stay 0–4095).
func decodePGM(r io.Reader, lim Limits) (*Gray, error) {
	br := bufio.NewReaderSize(r, 1<<16)
	var magic [2]byte
	if _, err := io.ReadFull(br, magic[:]); err != nil {
		return nil, fmt.Errorf("%w: pgm header: %v", ErrCorrupt, err)
	}
	var v [3]int
	for i, name := range []string{"width", "height", "maxval"} {
		n, err := pgmNumber(br)
		if err != nil {
			return nil, fmt.Errorf("%w: pgm header %s: %v", ErrCorrupt, name, err)
		}
		v[i] = n
	}
	w, h, maxval := v[0], v[1], v[2]
	if w <= 0 || h <= 0 {
		return nil, fmt.Errorf("%w: pgm header declares %d×%d px", ErrTooSmall, w, h)
	}
	if maxval < 1 || maxval > 65535 {
		return nil, fmt.Errorf("%w: pgm maxval %d: want 1 to 65535", ErrCorrupt, maxval)
	}
	if px := int64(w) * int64(h); px > lim.MaxPixels {
		return nil, fmt.Errorf("%w: pgm header declares %d×%d = %d px, over the limit of %d px; "+
			"crop or bin the image, or raise the pixel limit", ErrTooLarge, w, h, px, lim.MaxPixels)
	}
	// pgmNumber consumed the one whitespace character after maxval.
	bps := 1
	if maxval > 255 {
		bps = 2
	}
	g := NewGray(w, h)
	g.Bits = 8
	if bps == 2 {
		g.Bits = 16
	}
	row := make([]byte, w*bps)
	for y := 0; y < h; y++ {
		if _, err := io.ReadFull(br, row); err != nil {
			return nil, fmt.Errorf("%w: pgm: file ends in row %d of %d (%v)", ErrCorrupt, y, h, err)
		}
		out := g.Pix[y*g.Stride : y*g.Stride+w]
		top := 0
		if bps == 1 {
			for x, b := range row {
				out[x] = float32(b)
				top = max(top, int(b))
			}
		} else {
			for x := range out {
				s := int(row[2*x])<<8 | int(row[2*x+1])
				out[x] = float32(s)
				top = max(top, s)
			}
		}
		if top > maxval {
			return nil, fmt.Errorf("%w: pgm row %d holds the sample %d, above the header's maxval %d", ErrCorrupt, y, top, maxval)
		}
	}
	return g, nil
}

// pgmNumber skips whitespace and comments, reads a decimal number and the
// one whitespace character that ends it.
func pgmNumber(br *bufio.Reader) (int, error) {
	var digits []byte
	for {
		c, err := br.ReadByte()
		if err != nil {
			return 0, fmt.Errorf("header ends early (%v)", err)
		}
		switch {
		case c == '#' && len(digits) == 0:
			if _, err := br.ReadString('\n'); err != nil {
				return 0, fmt.Errorf("comment runs to the end of the file")
			}
		case isSpace(c) && len(digits) == 0:
		case isSpace(c):
			return strconv.Atoi(string(digits))
		case c >= '0' && c <= '9' && len(digits) < 9:
			digits = append(digits, c)
		default:
			return 0, fmt.Errorf("unexpected byte %q; want a decimal number of at most 9 digits", c)
		}
	}
}

// WritePGM encodes g as a binary PGM with 8-bit samples (bits 8, maxval
// 255) or 16-bit samples (bits 12 or 16, maxval 4095 or 65535); see
// ToImage for the level mapping.
func WritePGM(w io.Writer, g *Gray, bits int) error {
	top, err := MaxLevel(bits)
	if err != nil {
		return err
	}
	bw := bufio.NewWriterSize(w, 1<<16)
	fmt.Fprintf(bw, "P5\n%d %d\n%d\n", g.W, g.H, int(top))
	for y := 0; y < g.H; y++ {
		for _, v := range g.Pix[y*g.Stride : y*g.Stride+g.W] {
			q := uint16(clipRound(float64(v), top))
			if bits == 8 {
				bw.WriteByte(uint8(q))
			} else {
				bw.WriteByte(uint8(q >> 8))
				bw.WriteByte(uint8(q))
			}
		}
	}
	return bw.Flush()
}

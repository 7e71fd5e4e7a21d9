package imageio

import (
	"bytes"
	"encoding/binary"
	"errors"
	"hash/crc32"
	"image"
	"image/color"
	"image/png"
	"testing"
)

// pngChunk is one chunk of a PNG file.
type pngChunk struct {
	typ  string
	data []byte
}

// pngChunks splits a PNG file into its chunks (ISO/IEC 15948:2003, PNG
// second edition, 5.3: length, type, data, CRC).
func pngChunks(t *testing.T, b []byte) []pngChunk {
	t.Helper()
	var out []pngChunk
	for p := len(pngSignature); p < len(b); {
		n := int(binary.BigEndian.Uint32(b[p:]))
		out = append(out, pngChunk{string(b[p+4 : p+8]), append([]byte(nil), b[p+8:p+8+n]...)})
		p += 12 + n
	}
	return out
}

// pngFile writes chunks as a PNG file with their CRCs right.
func pngFile(cs []pngChunk) []byte {
	b := []byte(pngSignature)
	for _, c := range cs {
		b = binary.BigEndian.AppendUint32(b, uint32(len(c.data)))
		td := append([]byte(c.typ), c.data...)
		b = append(b, td...)
		b = binary.BigEndian.AppendUint32(b, crc32.ChecksumIEEE(td))
	}
	return b
}

// speckleImages returns a 23×17 image of each kind Go's PNG encoder writes: grey
// 8 and 16 bits, true colour with and without alpha at 8 and 16 bits, and
// palettes of 2, 16 and 256 colours (bit depths 1, 4 and 8).
func speckleImages() map[string]image.Image {
	const w, h = 23, 17
	v := func(x, y int) uint8 { return uint8((x*37 + y*91 + x*y*13) % 251) }
	g8, g16 := image.NewGray(image.Rect(0, 0, w, h)), image.NewGray16(image.Rect(0, 0, w, h))
	rgb, rgba64 := image.NewRGBA(image.Rect(0, 0, w, h)), image.NewNRGBA64(image.Rect(0, 0, w, h))
	out := map[string]image.Image{"grey8": g8, "grey16": g16, "rgb8": rgb, "rgba16": rgba64}
	for _, np := range []int{2, 16, 256} {
		pal := make(color.Palette, np)
		for i := range pal {
			pal[i] = color.RGBA{uint8(i), uint8(255 - i), uint8(i * 7), 255}
		}
		p := image.NewPaletted(image.Rect(0, 0, w, h), pal)
		for y := 0; y < h; y++ {
			for x := 0; x < w; x++ {
				p.SetColorIndex(x, y, uint8(int(v(x, y))%min(np, 251)))
			}
		}
		out[map[int]string{2: "palette1", 16: "palette4", 256: "palette8"}[np]] = p
	}
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			g8.SetGray(x, y, color.Gray{v(x, y)})
			g16.SetGray16(x, y, color.Gray16{uint16(v(x, y))*257 + 3})
			rgb.Set(x, y, color.RGBA{v(x, y), v(y, x), 40, 255})
			rgba64.Set(x, y, color.NRGBA64{uint16(v(x, y)) << 8, 9, 1000, 30000})
		}
	}
	return out
}

// TestCheckPNG checks CheckPNG against Go's image/png decoder and
// Decode on intact files of every kind: the same size and bit depth.
func TestCheckPNG(t *testing.T) {
	for name, img := range speckleImages() {
		b := encodePNG(t, img)
		g, err := Decode(bytes.NewReader(b), Limits{})
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		h, err := CheckPNG(b, Limits{})
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		if want := (Header{Format: "png", W: g.W, H: g.H, Bits: g.Bits}); h != want {
			t.Errorf("%s: CheckPNG %+v, Decode %+v", name, h, want)
		}
	}
}

// TestCheckPNGDamaged damages a PNG file in the ways the PNG
// specification (ISO/IEC 15948:2003, sections 5 and 11) forbids, each
// with the chunks' CRCs made right again unless the damage is to the
// bytes themselves: Go's image/png decoder refuses each file, and so must
// CheckPNG, with ErrCorrupt (ErrTooLarge for a size over the limit).
func TestCheckPNGDamaged(t *testing.T) {
	good := encodePNG(t, speckleImages()["grey8"])
	pal := encodePNG(t, speckleImages()["palette4"])
	edit := func(src []byte, f func([]pngChunk) []pngChunk) []byte {
		return pngFile(f(pngChunks(t, src)))
	}
	ihdr := func(off int, v byte) []byte {
		return edit(good, func(cs []pngChunk) []pngChunk { cs[0].data[off] = v; return cs })
	}
	without := func(src []byte, typ string) []byte {
		return edit(src, func(cs []pngChunk) []pngChunk {
			var out []pngChunk
			for _, c := range cs {
				if c.typ != typ {
					out = append(out, c)
				}
			}
			return out
		})
	}
	flipped := func(i int) []byte { b := append([]byte(nil), good...); b[i] ^= 0x10; return b }
	cases := []struct {
		name string
		b    []byte
		want error
	}{
		{"cut in the image data", good[:len(good)/2], ErrCorrupt},
		{"cut before IEND", good[:len(good)-12], ErrCorrupt},
		{"cut in the IEND CRC", good[:len(good)-2], ErrCorrupt},
		{"a byte of the image data changed", flipped(len(good) / 2), ErrCorrupt},
		{"a byte of IHDR changed", flipped(20), ErrCorrupt},
		{"bit depth 3", ihdr(8, 3), ErrCorrupt},
		{"colour type 5", ihdr(9, 5), ErrCorrupt},
		{"16-bit palette", edit(pal, func(cs []pngChunk) []pngChunk { cs[0].data[8] = 16; return cs }), ErrCorrupt},
		{"compression method 1", ihdr(10, 1), ErrCorrupt},
		{"filter method 1", ihdr(11, 1), ErrCorrupt},
		{"interlace method 2", ihdr(12, 2), ErrCorrupt},
		{"zero width", edit(good, func(cs []pngChunk) []pngChunk { copy(cs[0].data, []byte{0, 0, 0, 0}); return cs }), ErrCorrupt},
		{"negative height", edit(good, func(cs []pngChunk) []pngChunk { cs[0].data[4] = 0x80; return cs }), ErrCorrupt},
		{"huge size", edit(good, func(cs []pngChunk) []pngChunk { copy(cs[0].data, []byte{0, 0, 8, 0, 0, 0, 4, 0}); return cs }), ErrTooLarge},
		{"IHDR of 12 bytes", edit(good, func(cs []pngChunk) []pngChunk { cs[0].data = cs[0].data[:12]; return cs }), ErrCorrupt},
		{"no IEND", without(good, "IEND"), ErrCorrupt},
		{"no image data", without(good, "IDAT"), ErrCorrupt},
		{"palette image without PLTE", without(pal, "PLTE"), ErrCorrupt},
		{"PLTE in a grey image", edit(good, func(cs []pngChunk) []pngChunk {
			return append([]pngChunk{cs[0], {"PLTE", make([]byte, 6)}}, cs[1:]...)
		}), ErrCorrupt},
		{"PLTE of 17 colours for 4 bits", edit(pal, func(cs []pngChunk) []pngChunk {
			for i := range cs {
				if cs[i].typ == "PLTE" {
					cs[i].data = make([]byte, 3*17)
				}
			}
			return cs
		}), ErrCorrupt},
		{"IDAT before IHDR", edit(good, func(cs []pngChunk) []pngChunk { cs[0], cs[1] = cs[1], cs[0]; return cs }), ErrCorrupt},
		{"IEND not empty", edit(good, func(cs []pngChunk) []pngChunk { cs[len(cs)-1].data = []byte{0}; return cs }), ErrCorrupt},
		{"tRNS of 3 bytes in a grey image", edit(good, func(cs []pngChunk) []pngChunk {
			return append([]pngChunk{cs[0], {"tRNS", make([]byte, 3)}}, cs[1:]...)
		}), ErrCorrupt},
		{"image data without a zlib header", edit(good, func(cs []pngChunk) []pngChunk {
			for i := range cs {
				if cs[i].typ == "IDAT" {
					cs[i].data[0] = 0x79 // compression method 9
				}
			}
			return cs
		}), ErrCorrupt},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if _, err := png.Decode(bytes.NewReader(c.b)); err == nil && c.want != ErrTooLarge {
				t.Fatal("the case is not damaged: image/png decodes it")
			}
			_, err := CheckPNG(c.b, Limits{MaxPixels: 1 << 20})
			if !errors.Is(err, c.want) {
				t.Fatalf("CheckPNG: %v, want %v", err, c.want)
			}
			if _, derr := Decode(bytes.NewReader(c.b), Limits{MaxPixels: 1 << 20}); !errors.Is(derr, c.want) {
				t.Errorf("Decode: %v, CheckPNG: %v; they should agree", derr, err)
			}
		})
	}
}

// TestCheckPNGAllCuts cuts an intact PNG after every byte, and changes
// every byte in turn: CheckPNG refuses each file Go's image/png decoder
// refuses, with one exception, which this test expects: a change inside the
// compressed image data, made with the chunk's CRC made right again, that
// the decoder finds only by inflating (CheckPNG does not inflate). Every file
// the decoder reads, CheckPNG passes with the decoder's size.
func TestCheckPNGAllCuts(t *testing.T) {
	good := encodePNG(t, speckleImages()["palette8"])
	agree := func(what string, b []byte, inflateOnly bool) {
		t.Helper()
		img, derr := png.Decode(bytes.NewReader(b))
		h, err := CheckPNG(b, Limits{})
		switch {
		case derr == nil && err != nil:
			t.Fatalf("%s: image/png decodes it, CheckPNG refuses it: %v", what, err)
		case derr == nil && (h.W != img.Bounds().Dx() || h.H != img.Bounds().Dy()):
			t.Fatalf("%s: CheckPNG %+v, image/png %v", what, h, img.Bounds())
		case derr != nil && err == nil && !inflateOnly:
			t.Fatalf("%s: image/png refuses it (%v), CheckPNG passes it", what, derr)
		case err != nil && !errors.Is(err, ErrCorrupt):
			t.Fatalf("%s: %v does not wrap ErrCorrupt", what, err)
		}
	}
	for n := len(pngSignature); n < len(good); n++ {
		agree("cut", good[:n], false)
	}
	for i := len(pngSignature); i < len(good); i++ {
		b := append([]byte(nil), good...)
		b[i] ^= 0x01
		agree("changed byte", b, false)
	}
	// Changes inside the compressed data with the CRC made right: only an
	// inflate finds them.
	cs := pngChunks(t, good)
	for k := range cs {
		if cs[k].typ != "IDAT" {
			continue
		}
		for i := 2; i < len(cs[k].data); i++ {
			c2 := pngChunks(t, good)
			c2[k].data[i] ^= 0x01
			agree("changed compressed byte", pngFile(c2), true)
		}
	}
}

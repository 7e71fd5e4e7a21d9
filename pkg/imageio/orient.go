package imageio

import (
	"encoding/binary"
	"fmt"
	"image"

	"github.com/disintegration/imaging"
)

// Orientation is the value of the EXIF Orientation tag (0x0112, CIPA
// DC-008 "Exif 2.3", table of tag values): how the stored rows and columns
// must be turned for the image to show upright. 1 is upright as stored;
// 0 means the file carried no tag, which reads as 1.
type Orientation int

// String names the turn that shows an image upright, in the words of CIPA
// DC-008's table: the stored 0th row and 0th column become top and left.
func (o Orientation) String() string {
	switch o {
	case 0, 1:
		return "as stored"
	case 2:
		return "mirrored left-right"
	case 3:
		return "turned 180°"
	case 4:
		return "mirrored top-bottom"
	case 5:
		return "transposed (mirrored about the main diagonal)"
	case 6:
		return "turned 90° clockwise"
	case 7:
		return "transversed (mirrored about the other diagonal)"
	case 8:
		return "turned 90° counter-clockwise"
	}
	return fmt.Sprintf("orientation %d (not an EXIF value)", int(o))
}

// Meta is the record of o that results keep (field.json's extra
// "orientation"): the EXIF value and the turn applied.
func (o Orientation) Meta() map[string]any {
	return map[string]any{"exif": int(o), "applied": o.String()}
}

// Upright reports whether o leaves the pixels as stored.
func (o Orientation) Upright() bool { return o == 0 || o == 1 }

// exifOrientation returns the Orientation tag of IFD0 in the first APP1
// "Exif" segment of the JPEG data (the segments before the frame header),
// or 0 when there is none or the segment cannot be read. The layout is
// JPEG's marker segments (ITU-T T.81, annex B) and EXIF's TIFF-structured
// APP1 (CIPA DC-008, 4.5 and 4.6).
func exifOrientation(data []byte) Orientation {
	if len(data) < 4 || data[0] != 0xff || data[1] != 0xd8 {
		return 0
	}
	p := 2
	for p+4 <= len(data) {
		if data[p] != 0xff {
			return 0
		}
		m := data[p+1]
		if m == 0xd8 || (m >= 0xd0 && m <= 0xd7) || m == 0x01 || m == 0xff {
			p++
			continue
		}
		if m == 0xda || m == 0xd9 { // start of scan or end: no EXIF before it
			return 0
		}
		n := int(binary.BigEndian.Uint16(data[p+2:]))
		if n < 2 || p+2+n > len(data) {
			return 0
		}
		seg := data[p+4 : p+2+n]
		if m == 0xe1 && len(seg) >= 14 && string(seg[:6]) == "Exif\x00\x00" {
			return tiffOrientation(seg[6:])
		}
		p += 2 + n
	}
	return 0
}

// tiffOrientation reads the Orientation entry of IFD0 of a TIFF structure.
func tiffOrientation(t []byte) Orientation {
	var bo binary.ByteOrder
	switch string(t[:2]) {
	case "II":
		bo = binary.LittleEndian
	case "MM":
		bo = binary.BigEndian
	default:
		return 0
	}
	if bo.Uint16(t[2:]) != 42 {
		return 0
	}
	off := int(bo.Uint32(t[4:]))
	if off < 8 || off+2 > len(t) {
		return 0
	}
	n := int(bo.Uint16(t[off:]))
	for i := 0; i < n; i++ {
		e := off + 2 + 12*i
		if e+12 > len(t) {
			return 0
		}
		if bo.Uint16(t[e:]) == 0x0112 && bo.Uint16(t[e+2:]) == 3 { // SHORT
			if v := Orientation(bo.Uint16(t[e+8:])); v >= 1 && v <= 8 {
				return v
			}
			return 0
		}
	}
	return 0
}

// Orient returns g turned as o says, so that it shows upright; for an
// upright o it returns g itself. The turn is an exact permutation of the
// pixels (mirror, transpose or a multiple of 90°): no grey level is
// interpolated. The turn is done by package imaging on 8-bit images,
// which is where EXIF orientation comes from (camera JPEGs); a 16-bit
// image with an orientation is refused rather than cut to 8 bits.
func Orient(g *Gray, o Orientation) (*Gray, error) {
	if o.Upright() {
		return g, nil
	}
	if o < 1 || o > 8 {
		return nil, fmt.Errorf("orient a %d×%d px image: %v; use 1–8", g.W, g.H, o)
	}
	if g.Bits > 8 {
		return nil, fmt.Errorf("orient a %d×%d px %d-bit image %s: only 8-bit images (camera JPEGs) carry an EXIF orientation here; store the %d-bit frames upright", g.W, g.H, g.Bits, o, g.Bits)
	}
	src, err := ToImage(g, 8)
	if err != nil {
		return nil, fmt.Errorf("orient a %d×%d px image: %w", g.W, g.H, err)
	}
	var t image.Image
	switch o { // the turns of imaging's own EXIF handling (imaging.AutoOrientation)
	case 2:
		t = imaging.FlipH(src)
	case 3:
		t = imaging.Rotate180(src)
	case 4:
		t = imaging.FlipV(src)
	case 5:
		t = imaging.Transpose(src)
	case 6:
		t = imaging.Rotate270(src)
	case 7:
		t = imaging.Transverse(src)
	case 8:
		t = imaging.Rotate90(src)
	}
	out := FromImage(t)
	out.Bits = g.Bits
	out.Orientation = o
	return out, nil
}

// OrientSeries turns the reference and every frame by the reference's
// orientation, as the camera meant it when the series began: a camera on a
// fixture does not turn between frames, though its tilt sensor may write a
// different tag to a later frame when the camera points straight down or
// up. It returns the orientation applied, the turned images (the
// reference first) and the indices of the frames whose own tag differed
// from the reference's, which a caller reports.
func OrientSeries(ref *Gray, frames ...*Gray) (Orientation, []*Gray, []int, error) {
	o := ref.Orientation
	if o == 0 {
		o = 1
	}
	out := make([]*Gray, 0, 1+len(frames))
	var differ []int
	for i, g := range append([]*Gray{ref}, frames...) {
		if g == nil {
			out = append(out, nil)
			continue
		}
		if i > 0 && g.Orientation != ref.Orientation && !(g.Orientation.Upright() && ref.Orientation.Upright()) {
			differ = append(differ, i-1)
		}
		t, err := Orient(g, o)
		if err != nil {
			return o, nil, nil, err
		}
		out = append(out, t)
	}
	return o, out, differ, nil
}

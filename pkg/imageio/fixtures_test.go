package imageio_test

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"flag"
	"image"
	"image/jpeg"
	"os"
	"path/filepath"
	"testing"

	"github.com/disintegration/imaging"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// update rewrites the shared fixtures in testdata/images from pkg/synth
// (go test ./pkg/imageio -run Fixtures -update); the reference decodes are
// then refreshed with scripts/ref_decode.py (see testdata/README.md).
var update = flag.Bool("update", false, "rewrite the fixtures in testdata/images")

// fixtureDir is the top-level testdata folder of shared test inputs.
const fixtureDir = "../../testdata/images"

// speckle renders the fixture scene: 96×64 px (wider than high, so a
// transposed read shows), 4 px discs, seed 18, noise σ 1 grey level of
// the 8-bit scale, at the given depth.
func speckle(t *testing.T, bits int) *imageio.Gray {
	t.Helper()
	p, err := synth.NewPattern(synth.PatternOptions{Diameter: 4, Seed: 18, Bounds: synth.ImageRect(96, 64, 8)})
	if err != nil {
		t.Fatal(err)
	}
	noise := 1.0
	if bits == 16 {
		noise = 257
	}
	g, _, err := synth.Render(p, nil, synth.RenderOptions{W: 96, H: 64, Noise: noise, Bits: bits, Seed: 18, Workers: 1})
	if err != nil {
		t.Fatal(err)
	}
	return g
}

// scene renders the orientation scene, upright: 160×120 px, 4 px discs,
// seed 6, the deformed frame moved by u = 1.3, v = −0.6 px and stretched
// 0.5 % along x about the centre.
func scene(t *testing.T) (ref, def *imageio.Gray) {
	t.Helper()
	m := synth.Affine{F: [2][2]float64{{1.005, 0}, {0, 1}}, U: 1.3, V: -0.6, CX: 79.5, CY: 59.5}
	ref, def, err := synth.Pair(synth.PatternOptions{Diameter: 4, Seed: 6}, m, synth.RenderOptions{W: 160, H: 120, Noise: 0.5, Seed: 6, Workers: 1})
	if err != nil {
		t.Fatal(err)
	}
	return ref, def
}

// withOrientation returns the JPEG data with an APP1 EXIF segment holding
// only IFD0's Orientation tag (CIPA DC-008, 4.5.4 and 4.6.4, tag 0x0112,
// SHORT), inserted after SOI as a camera writes it.
func withOrientation(data []byte, o uint16) []byte {
	var t bytes.Buffer
	t.WriteString("MM\x00\x2a")
	binary.Write(&t, binary.BigEndian, uint32(8)) // IFD0 offset
	binary.Write(&t, binary.BigEndian, uint16(1)) // one entry
	binary.Write(&t, binary.BigEndian, [4]uint16{0x0112, 3, 0, 1})
	binary.Write(&t, binary.BigEndian, [2]uint16{o, 0})
	binary.Write(&t, binary.BigEndian, uint32(0)) // no next IFD
	seg := append([]byte("Exif\x00\x00"), t.Bytes()...)
	var out bytes.Buffer
	out.Write(data[:2])
	out.Write([]byte{0xff, 0xe1, byte((len(seg) + 2) >> 8), byte(len(seg) + 2)})
	out.Write(seg)
	out.Write(data[2:])
	return out.Bytes()
}

func encodeJPEG(t *testing.T, img image.Image) []byte {
	t.Helper()
	var b bytes.Buffer
	if err := jpeg.Encode(&b, img, &jpeg.Options{Quality: 95}); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// TestFixturesUpToDate checks that every committed image in testdata/images
// decodes to exactly what pkg/synth renders with the parameters stated in
// testdata/README.md (PNG and TIFF are lossless). With -update it writes
// them.
func TestFixturesUpToDate(t *testing.T) {
	lossless := map[string]struct {
		bits, save int
	}{
		"speckle-8.png": {8, 8}, "speckle-16.png": {16, 16},
		"speckle-8.tif": {8, 8}, "speckle-16.tif": {16, 16},
		"speckle-12in16.png": {12, 12},
	}
	for name, c := range lossless {
		g := speckle(t, c.bits)
		path := filepath.Join(fixtureDir, name)
		if *update {
			if err := imageio.WriteFile(path, g, c.save); err != nil {
				t.Fatal(err)
			}
		}
		got, err := imageio.ReadFile(path, imageio.DefaultLimits())
		if err != nil {
			t.Fatal(err)
		}
		if got.W != g.W || got.H != g.H {
			t.Fatalf("%s: %d×%d px, want %d×%d", name, got.W, got.H, g.W, g.H)
		}
		for i := range g.Pix {
			if got.Pix[i] != g.Pix[i] {
				t.Fatalf("%s: pixel %d is %v, the rendering gives %v; re-run with -update if pkg/synth changed on purpose", name, i, got.Pix[i], g.Pix[i])
			}
		}
	}
	if !*update {
		return
	}
	ref, def := scene(t)
	for name, g := range map[string]*imageio.Gray{"scene-ref": ref, "scene-def": def} {
		up, err := imageio.ToImage(g, 8)
		if err != nil {
			t.Fatal(err)
		}
		// Upright as stored, and as a camera held a quarter turn
		// clockwise stores it: the upright scene turned 90°
		// counter-clockwise, tagged 6 (turn 90° clockwise to show).
		if err := os.WriteFile(filepath.Join(fixtureDir, name+"-upright.jpg"), encodeJPEG(t, up), 0o644); err != nil {
			t.Fatal(err)
		}
		rot := encodeJPEG(t, imaging.Rotate90(up))
		if err := os.WriteFile(filepath.Join(fixtureDir, name+"-exif6.jpg"), withOrientation(rot, 6), 0o644); err != nil {
			t.Fatal(err)
		}
	}
}

// refDecode is one entry of testdata/images/decode_ref.json, written by
// scripts/ref_decode.py from OpenCV's cv2.imread(path, IMREAD_UNCHANGED)
// and scikit-image's skimage.io.imread.
type refDecode struct {
	File     string    `json:"file"`
	Library  string    `json:"library"`
	Version  string    `json:"version"`
	Width    int       `json:"width"`
	Height   int       `json:"height"`
	Dtype    string    `json:"dtype"`
	Sum      float64   `json:"sum"`
	Min      float64   `json:"min"`
	Max      float64   `json:"max"`
	Samples  [][3]int  `json:"samples"` // x, y, value
	RowSums  []float64 `json:"row_sums"`
	Oriented bool      `json:"oriented"`
}

// TestDecodeAgainstReferenceLibraries decodes each committed fixture and
// compares it with the header (width, height, bit depth read by
// image.DecodeConfig) and with the decodes of two reference libraries
// stored in testdata/images/decode_ref.json: OpenCV 4.6
// (cv2.imread, IMREAD_UNCHANGED) and scikit-image 0.19 (skimage.io.imread).
// Lossless files must agree exactly, pixel sums, row sums and sampled
// pixels alike.
func TestDecodeAgainstReferenceLibraries(t *testing.T) {
	b, err := os.ReadFile(filepath.Join(fixtureDir, "decode_ref.json"))
	if err != nil {
		t.Fatal(err)
	}
	var refs []refDecode
	if err := json.Unmarshal(b, &refs); err != nil {
		t.Fatalf("decode_ref.json: %v", err)
	}
	seen := map[string]bool{}
	for _, r := range refs {
		if r.Oriented {
			continue // TestOrientationAgainstOpenCV
		}
		t.Run(r.File+"/"+r.Library, func(t *testing.T) {
			path := filepath.Join(fixtureDir, r.File)
			f, err := os.Open(path)
			if err != nil {
				t.Fatal(err)
			}
			cfg, _, err := image.DecodeConfig(f)
			f.Close()
			if err != nil {
				t.Fatal(err)
			}
			g, err := imageio.ReadFile(path, imageio.DefaultLimits())
			if err != nil {
				t.Fatal(err)
			}
			if g.W != cfg.Width || g.H != cfg.Height || g.W != r.Width || g.H != r.Height {
				t.Fatalf("size %d×%d, header %d×%d, %s %d×%d", g.W, g.H, cfg.Width, cfg.Height, r.Library, r.Width, r.Height)
			}
			wantBits := map[string]int{"uint8": 8, "uint16": 16}[r.Dtype]
			if g.Bits != wantBits {
				t.Errorf("Bits %d, %s reads %s", g.Bits, r.Library, r.Dtype)
			}
			var sum, lo, hi float64 = 0, 1e9, -1e9
			for y := 0; y < g.H; y++ {
				var rs float64
				for x := 0; x < g.W; x++ {
					v := float64(g.At(x, y))
					rs += v
					lo, hi = min(lo, v), max(hi, v)
				}
				sum += rs
				if rs != r.RowSums[y] {
					t.Fatalf("row %d sums to %v, %s %v", y, rs, r.Library, r.RowSums[y])
				}
			}
			if sum != r.Sum || lo != r.Min || hi != r.Max {
				t.Errorf("sum %v min %v max %v; %s: %v %v %v", sum, lo, hi, r.Library, r.Sum, r.Min, r.Max)
			}
			for _, s := range r.Samples {
				if v := g.At(s[0], s[1]); v != float32(s[2]) {
					t.Errorf("pixel (%d, %d) = %v, %s %d", s[0], s[1], v, r.Library, s[2])
				}
			}
			seen[r.File] = true
		})
	}
	for _, f := range []string{"speckle-8.png", "speckle-16.png", "speckle-8.tif", "speckle-16.tif", "speckle-12in16.png"} {
		if !seen[f] {
			t.Errorf("decode_ref.json has no reference decode of %s; run scripts/ref_decode.py", f)
		}
	}
}

// TestOrientationAgainstOpenCV reads the JPEGs tagged with EXIF orientation
// 6 (turn 90° clockwise to show upright), turns them with Orient and
// compares them with OpenCV 4.6's cv2.imread(IMREAD_GRAYSCALE), which
// applies the EXIF orientation itself (testdata/images/decode_ref.json).
// The two JPEG decoders may differ by a grey level or two (their inverse
// DCTs round differently), so pixels agree to 3 levels and row means to
// 0.5; a turn the wrong way reverses the rows and fails by tens of levels.
func TestOrientationAgainstOpenCV(t *testing.T) {
	b, err := os.ReadFile(filepath.Join(fixtureDir, "decode_ref.json"))
	if err != nil {
		t.Fatal(err)
	}
	var refs []refDecode
	if err := json.Unmarshal(b, &refs); err != nil {
		t.Fatalf("decode_ref.json: %v", err)
	}
	n := 0
	for _, r := range refs {
		if !r.Oriented {
			continue
		}
		n++
		g, err := imageio.ReadFile(filepath.Join(fixtureDir, r.File), imageio.DefaultLimits())
		if err != nil {
			t.Fatal(err)
		}
		if g.Orientation != 6 || g.W != r.Height || g.H != r.Width {
			t.Fatalf("%s: stored %d×%d px with orientation %d; want %d×%d stored, orientation 6", r.File, g.W, g.H, g.Orientation, r.Height, r.Width)
		}
		u, err := imageio.Orient(g, g.Orientation)
		if err != nil {
			t.Fatal(err)
		}
		if u.W != r.Width || u.H != r.Height || u.Orientation != 6 {
			t.Fatalf("%s: upright %d×%d px, OpenCV %d×%d", r.File, u.W, u.H, r.Width, r.Height)
		}
		for y := 0; y < u.H; y++ {
			var s float64
			for x := 0; x < u.W; x++ {
				s += float64(u.At(x, y))
			}
			if d := (s - r.RowSums[y]) / float64(u.W); d > 0.5 || d < -0.5 {
				t.Fatalf("%s: upright row %d mean differs from OpenCV's by %.2f grey levels", r.File, y, d)
			}
		}
		for _, p := range r.Samples {
			if d := float64(u.At(p[0], p[1])) - float64(p[2]); d > 3 || d < -3 {
				t.Errorf("%s: upright pixel (%d, %d) = %v, OpenCV %d", r.File, p[0], p[1], u.At(p[0], p[1]), p[2])
			}
		}
	}
	if n != 2 {
		t.Errorf("decode_ref.json has %d oriented entries, want 2; run scripts/ref_decode.py", n)
	}
}

// TestOrientationValues checks every EXIF orientation value (CIPA DC-008,
// tag 0x0112: value v means the stored 0th row and column are, in order,
// 1 top/left, 2 top/right, 3 bottom/right, 4 bottom/left, 5 left/top,
// 6 right/top, 7 right/bottom, 8 left/bottom of the upright image) on a
// 3×2 image whose pixels are numbered, and that tags are read from the
// file.
func TestOrientationValues(t *testing.T) {
	// stored is the upright image u (3 wide, 2 high: 1 2 3 / 4 5 6) as a
	// camera stores it under each tag.
	cases := []struct {
		o      imageio.Orientation
		w, h   int
		stored []float32
	}{
		{1, 3, 2, []float32{1, 2, 3, 4, 5, 6}},
		{2, 3, 2, []float32{3, 2, 1, 6, 5, 4}},
		{3, 3, 2, []float32{6, 5, 4, 3, 2, 1}},
		{4, 3, 2, []float32{4, 5, 6, 1, 2, 3}},
		{5, 2, 3, []float32{1, 4, 2, 5, 3, 6}},
		{6, 2, 3, []float32{3, 6, 2, 5, 1, 4}},
		{7, 2, 3, []float32{6, 3, 5, 2, 4, 1}},
		{8, 2, 3, []float32{4, 1, 5, 2, 6, 3}},
	}
	want := []float32{1, 2, 3, 4, 5, 6}
	for _, c := range cases {
		g := &imageio.Gray{Pix: c.stored, Stride: c.w, W: c.w, H: c.h, Bits: 8}
		u, err := imageio.Orient(g, c.o)
		if err != nil {
			t.Fatal(err)
		}
		if u.W != 3 || u.H != 2 {
			t.Fatalf("orientation %d: %d×%d, want 3×2", c.o, u.W, u.H)
		}
		for i, v := range want {
			if u.Pix[i] != v {
				t.Fatalf("orientation %d (%v): upright %v, want %v", c.o, c.o, u.Pix, want)
			}
		}
		// The tag round-trips through a JPEG file.
		img, _ := imageio.ToImage(g, 8)
		data := withOrientation(encodeJPEG(t, img), uint16(c.o))
		d, err := imageio.Decode(bytes.NewReader(data), imageio.DefaultLimits())
		if err != nil {
			t.Fatal(err)
		}
		if d.Orientation != c.o {
			t.Errorf("decoded orientation %d, tagged %d", d.Orientation, c.o)
		}
	}
	if _, err := imageio.Orient(&imageio.Gray{Pix: make([]float32, 4), Stride: 2, W: 2, H: 2, Bits: 16}, 6); err == nil {
		t.Error("Orient turned a 16-bit image to 8 bits without an error")
	}
	if _, err := imageio.Orient(&imageio.Gray{Pix: make([]float32, 4), Stride: 2, W: 2, H: 2, Bits: 8}, 9); err == nil {
		t.Error("Orient accepted orientation 9")
	}
}

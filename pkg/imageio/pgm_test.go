package imageio_test

import (
	"bytes"
	"errors"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
)

// TestPGMBytes decodes PGM files written byte by byte from the format's
// description (Netpbm, "pgm - Netpbm grayscale image format": P5, width,
// height, maxval as decimal text separated by whitespace, "#" comments,
// one whitespace byte, then the samples row by row, one byte each below
// maxval 256, else two bytes, most significant first).
func TestPGMBytes(t *testing.T) {
	for _, tc := range []struct {
		name string
		data string
		bits int
		want []float32
	}{
		{"8-bit", "P5 3 2 255\n\x00\x01\x02\xfd\xfe\xff", 8, []float32{0, 1, 2, 253, 254, 255}},
		{"comments and tabs", "P5\n# a comment\n3\t2\n# another\n200\r\x00\x01\x02\x03\x04\xc8", 8, []float32{0, 1, 2, 3, 4, 200}},
		{"12-bit levels in 16-bit samples", "P5 2 2 4095\n\x00\x00\x01\x02\x0f\xff\x08\x00", 16, []float32{0, 258, 4095, 2048}},
		{"16-bit", "P5 1 2 65535 \xff\xff\x80\x01", 16, []float32{65535, 32769}},
	} {
		g, err := imageio.Decode(strings.NewReader(tc.data), imageio.DefaultLimits())
		if err != nil {
			t.Errorf("%s: %v", tc.name, err)
			continue
		}
		if g.Bits != tc.bits || g.W*g.H != len(tc.want) {
			t.Errorf("%s: %d×%d px, %d bits; want %d samples, %d bits", tc.name, g.W, g.H, g.Bits, len(tc.want), tc.bits)
			continue
		}
		for i, w := range tc.want {
			if got := g.Pix[(i/g.W)*g.Stride+i%g.W]; got != w {
				t.Errorf("%s: sample %d = %v, want %v", tc.name, i, got, w)
			}
		}
	}
}

// TestPGMBad: damaged headers and data are errors of the right kind, and
// a header declaring too many pixels is refused before any are read.
func TestPGMBad(t *testing.T) {
	lim := imageio.Limits{MaxPixels: 1000}
	for _, tc := range []struct {
		name, data string
		want       error
	}{
		{"truncated data", "P5 4 4 255\n\x00\x01", imageio.ErrCorrupt},
		{"header ends", "P5 4 4", imageio.ErrCorrupt},
		{"letters in the header", "P5 4 x4 255\n", imageio.ErrCorrupt},
		{"maxval 0", "P5 1 1 0\n\x00", imageio.ErrCorrupt},
		{"maxval too large", "P5 1 1 65536\n\x00\x00", imageio.ErrCorrupt},
		{"sample above maxval", "P5 2 1 100\n\x05\x65", imageio.ErrCorrupt},
		{"zero width", "P5 0 4 255\n", imageio.ErrTooSmall},
		{"too many pixels", "P5 100000 100000 255\n", imageio.ErrTooLarge},
	} {
		if _, err := imageio.Decode(strings.NewReader(tc.data), lim); !errors.Is(err, tc.want) {
			t.Errorf("%s: %v, want %v", tc.name, err, tc.want)
		}
	}
}

// TestPGMWithOpenCV writes 8- and 16-bit PGM files with WritePGM, reads
// them back with Decode and with OpenCV (cv2.imread, IMREAD_UNCHANGED;
// Debian python3-opencv through /usr/bin/python3), and compares every
// sample with the image's rounded levels.
func TestPGMWithOpenCV(t *testing.T) {
	py := "/usr/bin/python3"
	if err := exec.Command(py, "-c", "import cv2").Run(); err != nil {
		t.Fatalf("%s with cv2 not available (apt-get install python3-opencv): %v", py, err)
	}
	dir := t.TempDir()
	for _, bits := range []int{8, 16} {
		g := imageio.NewGray(37, 23)
		top := 255.0
		if bits == 16 {
			top = 65535
		}
		for i := range g.Pix {
			g.Pix[i] = float32(float64((i*7919)%1000) / 999 * top)
		}
		var b bytes.Buffer
		if err := imageio.WritePGM(&b, g, bits); err != nil {
			t.Fatal(err)
		}
		back, err := imageio.Decode(bytes.NewReader(b.Bytes()), imageio.DefaultLimits())
		if err != nil {
			t.Fatal(err)
		}
		path := filepath.Join(dir, "g"+strconv.Itoa(bits)+".pgm")
		if err := os.WriteFile(path, b.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
		out, err := exec.Command(py, "-c", `import cv2, sys
m = cv2.imread(sys.argv[1], cv2.IMREAD_UNCHANGED)
print(m.dtype, m.shape[1], m.shape[0])
print(" ".join(str(int(v)) for v in m.ravel()))`, path).CombinedOutput()
		if err != nil {
			t.Fatalf("OpenCV: %v\n%s", err, out)
		}
		lines := strings.Split(strings.TrimSpace(string(out)), "\n")
		wantType := map[int]string{8: "uint8", 16: "uint16"}[bits]
		if len(lines) != 2 || lines[0] != wantType+" 37 23" {
			t.Fatalf("%d-bit: OpenCV read %q, want %s 37×23", bits, lines[0], wantType)
		}
		cv := strings.Fields(lines[1])
		if back.Bits != bits || back.W != 37 || back.H != 23 || len(cv) != 37*23 {
			t.Fatalf("%d-bit: decoded %d×%d %d bits, OpenCV %d samples", bits, back.W, back.H, back.Bits, len(cv))
		}
		for i, s := range cv {
			want := float32(int(float64(g.Pix[i]) + 0.5))
			if s != strconv.Itoa(int(want)) || back.Pix[i] != want {
				t.Fatalf("%d-bit sample %d: OpenCV %s, Decode %v, want %v", bits, i, s, back.Pix[i], want)
			}
		}
	}
}

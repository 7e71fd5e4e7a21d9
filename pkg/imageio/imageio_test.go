package imageio

import (
	"bytes"
	"encoding/binary"
	"errors"
	"hash/crc32"
	"image"
	"image/color"
	"image/jpeg"
	"image/png"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"golang.org/x/image/bmp"
	"golang.org/x/image/tiff"
)

func encodePNG(t *testing.T, m image.Image) []byte {
	t.Helper()
	var b bytes.Buffer
	if err := png.Encode(&b, m); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// TestRamp16: a 16-bit ramp keeps all 65,536 levels through PNG and TIFF
// (float32 represents every integer below 2²⁴ exactly, IEEE 754).
func TestRamp16(t *testing.T) {
	m := image.NewGray16(image.Rect(0, 0, 256, 256))
	for i := 0; i < 65536; i++ {
		m.SetGray16(i%256, i/256, color.Gray16{Y: uint16(i)})
	}
	var tb bytes.Buffer
	if err := tiff.Encode(&tb, m, nil); err != nil {
		t.Fatal(err)
	}
	for name, data := range map[string][]byte{"png": encodePNG(t, m), "tiff": tb.Bytes()} {
		g, err := Decode(bytes.NewReader(data), Limits{})
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		if g.Bits != 16 {
			t.Errorf("%s: Bits = %d, want 16", name, g.Bits)
		}
		seen := map[float32]bool{}
		for i, v := range g.Pix {
			if v != float32(i) {
				t.Fatalf("%s: pixel %d = %g, want %d", name, i, v, i)
			}
			seen[v] = true
		}
		if len(seen) != 65536 {
			t.Errorf("%s: %d distinct levels, want 65536", name, len(seen))
		}
	}
}

// TestColourLuma: colour converts with the ITU-R BT.601 luma weights
// 0.299, 0.587, 0.114 (ITU-R BT.601-7, also JFIF 1.02), for 8- and 16-bit
// PNG, and BMP.
func TestColourLuma(t *testing.T) {
	m8 := image.NewNRGBA(image.Rect(0, 0, 3, 1))
	m8.Set(0, 0, color.NRGBA{255, 0, 0, 255})
	m8.Set(1, 0, color.NRGBA{0, 255, 0, 255})
	m8.Set(2, 0, color.NRGBA{10, 20, 200, 255})
	want8 := []float64{0.299 * 255, 0.587 * 255, 0.299*10 + 0.587*20 + 0.114*200}
	m16 := image.NewRGBA64(image.Rect(0, 0, 1, 1))
	m16.Set(0, 0, color.RGBA64{1000, 60000, 30000, 65535})
	want16 := []float64{0.299*1000 + 0.587*60000 + 0.114*30000}
	var bb bytes.Buffer
	if err := bmp.Encode(&bb, m8); err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		name string
		data []byte
		want []float64
		bits int
	}{{"png8", encodePNG(t, m8), want8, 8}, {"png16", encodePNG(t, m16), want16, 16}, {"bmp", bb.Bytes(), want8, 8}} {
		g, err := Decode(bytes.NewReader(tc.data), Limits{})
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		if g.Bits != tc.bits {
			t.Errorf("%s: Bits %d, want %d", tc.name, g.Bits, tc.bits)
		}
		for i, w := range tc.want {
			if d := float64(g.Pix[i]) - w; d > 1e-3*w || d < -1e-3*w {
				t.Errorf("%s pixel %d: %g, want %g", tc.name, i, g.Pix[i], w)
			}
		}
	}
}

// TestJPEG: a grey JPEG decodes to its Y channel.
func TestJPEG(t *testing.T) {
	m := image.NewGray(image.Rect(0, 0, 16, 16))
	for i := range m.Pix {
		m.Pix[i] = 128
	}
	var b bytes.Buffer
	if err := jpeg.Encode(&b, m, &jpeg.Options{Quality: 95}); err != nil {
		t.Fatal(err)
	}
	g, err := Decode(&b, Limits{})
	if err != nil {
		t.Fatal(err)
	}
	if g.W != 16 || g.H != 16 || g.At(5, 5) < 126 || g.At(5, 5) > 130 {
		t.Errorf("jpeg: %d×%d, pixel %g", g.W, g.H, g.At(5, 5))
	}
}

// pngBomb returns a valid PNG signature and IHDR declaring w×h px, and no
// image data.
func pngBomb(w, h uint32) []byte {
	var b bytes.Buffer
	b.WriteString("\x89PNG\r\n\x1a\n")
	ihdr := make([]byte, 13)
	binary.BigEndian.PutUint32(ihdr[0:], w)
	binary.BigEndian.PutUint32(ihdr[4:], h)
	ihdr[8], ihdr[9] = 8, 0 // 8-bit greyscale
	chunk := append([]byte("IHDR"), ihdr...)
	binary.Write(&b, binary.BigEndian, uint32(13))
	b.Write(chunk)
	binary.Write(&b, binary.BigEndian, crc32.ChecksumIEEE(chunk))
	return b.Bytes()
}

// tiffBomb returns a little-endian TIFF header with one IFD declaring w×h px.
func tiffBomb(w, h uint32) []byte {
	var b bytes.Buffer
	le := binary.LittleEndian
	b.WriteString("II*\x00")
	binary.Write(&b, le, uint32(8))
	entries := [][3]uint32{ // tag, type LONG = 4 or SHORT = 3, value
		{256, 4, w}, {257, 4, h}, {258, 3, 8}, {259, 3, 1}, {262, 3, 1},
		{273, 4, 200}, {277, 3, 1}, {278, 4, h}, {279, 4, w * h},
	}
	binary.Write(&b, le, uint16(len(entries)))
	for _, e := range entries {
		binary.Write(&b, le, uint16(e[0]))
		binary.Write(&b, le, uint16(e[1]))
		binary.Write(&b, le, uint32(1))
		if e[1] == 3 {
			binary.Write(&b, le, uint16(e[2]))
			binary.Write(&b, le, uint16(0))
		} else {
			binary.Write(&b, le, e[2])
		}
	}
	binary.Write(&b, le, uint32(0))
	return b.Bytes()
}

// TestErrors: each kind of bad input gives its sentinel error, never a panic.
func TestErrors(t *testing.T) {
	good := encodePNG(t, image.NewGray(image.Rect(0, 0, 64, 64)))
	for _, tc := range []struct {
		name string
		data []byte
		lim  Limits
		want error
	}{
		{"empty", nil, Limits{}, ErrFormat},
		{"text", []byte("hello, this is not an image at all"), Limits{}, ErrFormat},
		{"gif-like", []byte("GIF89a\x01\x00\x01\x00"), Limits{}, ErrFormat},
		{"truncated png", good[:len(good)/2], Limits{}, ErrCorrupt},
		{"header only", good[:20], Limits{}, ErrCorrupt},
		{"png bomb", pngBomb(100000, 100000), Limits{}, ErrTooLarge},
		{"tiff bomb", tiffBomb(100000, 100000), Limits{}, ErrTooLarge},
		{"pixel limit", good, Limits{MaxPixels: 1000}, ErrTooLarge},
		{"byte limit", good, Limits{MaxBytes: 30}, ErrTooLarge},
	} {
		_, err := Decode(bytes.NewReader(tc.data), tc.lim)
		if !errors.Is(err, tc.want) {
			t.Errorf("%s: error %v, want %v", tc.name, err, tc.want)
		}
	}
	if _, err := ReadFile(filepath.Join(t.TempDir(), "missing.png"), Limits{}); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("missing file: %v", err)
	}
}

// TestReadFileMessages: a folder, an empty file and a text file renamed
// .png are each refused with ErrFormat and a message that names the file
// and says what is wrong with it.
func TestReadFileMessages(t *testing.T) {
	dir := t.TempDir()
	empty := filepath.Join(dir, "empty.png")
	text := filepath.Join(dir, "notes.png")
	if err := os.WriteFile(empty, nil, 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(text, []byte("frame list, not an image"), 0o644); err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		path, want string
	}{
		{dir, "it is a folder"},
		{empty, "the file is empty"},
		{text, "does not start like PNG"},
	} {
		_, err := ReadFile(tc.path, Limits{})
		if !errors.Is(err, ErrFormat) {
			t.Errorf("%s: error %v, want ErrFormat", tc.path, err)
			continue
		}
		if msg := err.Error(); !strings.Contains(msg, tc.path) || !strings.Contains(msg, tc.want) {
			t.Errorf("%s: message %q, want the path and %q", tc.path, msg, tc.want)
		}
	}
}

// TestRoundTrip: PNG and TIFF at 8, 12 and 16 bits write and read back the
// same integer levels; 12-bit levels are stored unscaled in 16-bit samples.
func TestRoundTrip(t *testing.T) {
	dir := t.TempDir()
	for _, bits := range []int{8, 12, 16} {
		max, _ := MaxLevel(bits)
		g := NewGray(37, 23)
		for i := range g.Pix {
			g.Pix[i] = float32(float64(i*7919%int(max+1)) + 0.3)
		}
		g.Pix[0], g.Pix[1] = -5, float32(max+100) // clipped
		for _, ext := range []string{".png", ".tif"} {
			path := filepath.Join(dir, "img"+ext)
			if err := WriteFile(path, g, bits); err != nil {
				t.Fatal(err)
			}
			r, err := ReadFile(path, Limits{})
			if err != nil {
				t.Fatal(err)
			}
			if r.W != g.W || r.H != g.H {
				t.Fatalf("%d-bit %s: size %d×%d", bits, ext, r.W, r.H)
			}
			for i, v := range r.Pix {
				want := clipRound(float64(g.Pix[i]), max)
				if float64(v) != want {
					t.Fatalf("%d-bit %s pixel %d: %g, want %g", bits, ext, i, v, want)
				}
			}
		}
	}
	if err := WriteFile(filepath.Join(dir, "x.jpg"), NewGray(2, 2), 8); !errors.Is(err, ErrFormat) {
		t.Errorf("jpg output: %v, want ErrFormat", err)
	}
	if err := WriteFile(filepath.Join(dir, "x.png"), NewGray(2, 2), 10); !errors.Is(err, ErrBits) {
		t.Errorf("10 bits: %v, want ErrBits", err)
	}
}

func speckleLike(w, h int) *Gray {
	g := NewGray(w, h)
	for i := range g.Pix {
		g.Pix[i] = float32((i*2654435761)%251) + 2
	}
	return g
}

func TestCheckPair(t *testing.T) {
	flat := NewGray(64, 64)
	for i := range flat.Pix {
		flat.Pix[i] = 100
	}
	a, b := speckleLike(64, 64), speckleLike(64, 64)
	for _, tc := range []struct {
		name     string
		ref, def *Gray
		subset   int
		want     []error
	}{
		{"ok", a, b, 31, nil},
		{"size mismatch", a, speckleLike(63, 64), 31, []error{ErrSizeMismatch}},
		{"too small", speckleLike(20, 64), speckleLike(20, 64), 31, []error{ErrTooSmall}},
		{"zero contrast", a, flat, 31, []error{ErrNoContrast}},
		{"nil", nil, b, 31, []error{ErrTooSmall}},
		{"several", speckleLike(20, 20), flat, 31, []error{ErrTooSmall, ErrNoContrast, ErrSizeMismatch}},
	} {
		err := CheckPair(tc.ref, tc.def, tc.subset)
		if tc.want == nil && err != nil {
			t.Errorf("%s: %v", tc.name, err)
		}
		if tc.want != nil && err == nil {
			t.Errorf("%s: no error", tc.name)
		}
		for _, w := range tc.want {
			if !errors.Is(err, w) {
				t.Errorf("%s: %v does not wrap %v", tc.name, err, w)
			}
		}
	}
}

// TestAutocorrelation: the FFT autocorrelation equals the direct sum of
// its definition, ρ(h) = C(h)/C(0) with C(h) the mean of (g(x) − ḡ)(g(x+h) − ḡ)
// over the overlapping pixel pairs.
func TestAutocorrelation(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 1))
	g := NewGray(41, 30)
	for i := range g.Pix {
		g.Pix[i] = float32(rng.NormFloat64()*20 + 100)
	}
	// Add some correlation along x so the lags are not all zero.
	for y := 0; y < g.H; y++ {
		for x := g.W - 1; x > 0; x-- {
			g.Pix[y*g.W+x] += g.Pix[y*g.W+x-1]
		}
	}
	mean, _, _, _ := Stats(g)
	direct := func(hx, hy int) float64 {
		var s float64
		n := 0
		for y := 0; y+hy < g.H; y++ {
			for x := 0; x+hx < g.W; x++ {
				s += (float64(g.At(x, y)) - mean) * (float64(g.At(x+hx, y+hy)) - mean)
				n++
			}
		}
		return s / float64(n)
	}
	ax, ay, err := Autocorrelation(g, 10)
	if err != nil {
		t.Fatal(err)
	}
	c0 := direct(0, 0)
	for h := 0; h <= 10; h++ {
		if d := ax[h] - direct(h, 0)/c0; d > 1e-9 || d < -1e-9 {
			t.Errorf("x lag %d: FFT %g, direct %g", h, ax[h], direct(h, 0)/c0)
		}
		if d := ay[h] - direct(0, h)/c0; d > 1e-9 || d < -1e-9 {
			t.Errorf("y lag %d: FFT %g, direct %g", h, ay[h], direct(0, h)/c0)
		}
	}
	if _, err := SpeckleSize(NewGray(64, 64)); !errors.Is(err, ErrNoContrast) {
		t.Errorf("uniform image: %v", err)
	}
}

// TestHWHMEqualsFFT: HWHM sums the lags directly and stops at the half
// crossing; it must find the crossing that the FFT autocorrelation of the
// same (windowed) image gives, to rounding, along both axes, for smooth
// blobs of several sizes and for an image larger than the window.
func TestHWHMEqualsFFT(t *testing.T) {
	cross := func(a []float64) float64 {
		for h := 1; h < len(a); h++ {
			if a[h] <= 0.5 {
				return float64(h-1) + (a[h-1]-0.5)/(a[h-1]-a[h])
			}
		}
		return math.NaN()
	}
	for _, tc := range []struct{ w, h, rx, ry int }{{120, 90, 2, 3}, {200, 160, 5, 1}, {700, 560, 3, 3}} {
		rng := rand.New(rand.NewPCG(uint64(tc.w), 7))
		g := NewGray(tc.w, tc.h)
		for i := range g.Pix {
			g.Pix[i] = float32(rng.NormFloat64())
		}
		// Box sums of (2rx+1)×(2ry+1) make blobs of that size.
		b := NewGray(tc.w, tc.h)
		for y := 0; y < tc.h; y++ {
			for x := 0; x < tc.w; x++ {
				var s float32
				for dy := -tc.ry; dy <= tc.ry; dy++ {
					for dx := -tc.rx; dx <= tc.rx; dx++ {
						xx, yy := min(max(x+dx, 0), tc.w-1), min(max(y+dy, 0), tc.h-1)
						s += g.Pix[yy*tc.w+xx]
					}
				}
				b.Pix[y*tc.w+x] = 100 + 10*s
			}
		}
		hx, hy, err := HWHM(b)
		if err != nil {
			t.Fatalf("%v: %v", tc, err)
		}
		win := b
		if b.W > MaxSpeckleWindow || b.H > MaxSpeckleWindow {
			w, h := min(b.W, MaxSpeckleWindow), min(b.H, MaxSpeckleWindow)
			win = b.Sub((b.W-w)/2, (b.H-h)/2, w, h)
		}
		ax, ay, err := Autocorrelation(win, min(64, win.W/4, win.H/4))
		if err != nil {
			t.Fatal(err)
		}
		if fx, fy := cross(ax), cross(ay); math.Abs(hx-fx) > 1e-9 || math.Abs(hy-fy) > 1e-9 {
			t.Errorf("%v: direct HWHM (%.12g, %.12g), from the FFT (%.12g, %.12g)", tc, hx, hy, fx, fy)
		}
	}
}

// TestStatsNaN: a NaN pixel makes the range NaN, as math.Min/Max would.
func TestStatsNaN(t *testing.T) {
	g := NewGray(4, 3)
	for i := range g.Pix {
		g.Pix[i] = float32(i)
	}
	if m, s, lo, hi := Stats(g); m != 5.5 || lo != 0 || hi != 11 || math.Abs(s-math.Sqrt(143.0/12)) > 1e-12 {
		t.Errorf("stats %v %v %v %v; want 5.5, √(143/12), 0, 11", m, s, lo, hi)
	}
	g.Pix[5] = float32(math.NaN())
	if _, _, lo, hi := Stats(g); !math.IsNaN(lo) || !math.IsNaN(hi) {
		t.Errorf("range with a NaN pixel: %v–%v, want NaN", lo, hi)
	}
}

func TestSub(t *testing.T) {
	g := NewGray(10, 8)
	for i := range g.Pix {
		g.Pix[i] = float32(i)
	}
	s := g.Sub(3, 2, 4, 5)
	if s.W != 4 || s.H != 5 || s.At(0, 0) != g.At(3, 2) || s.At(3, 4) != g.At(6, 6) {
		t.Errorf("Sub: %d×%d, corners %g %g", s.W, s.H, s.At(0, 0), s.At(3, 4))
	}
	if c := g.Sub(8, 6, 10, 10); c.W != 2 || c.H != 2 || c.At(1, 1) != g.At(9, 7) {
		t.Errorf("clipped Sub: %d×%d", c.W, c.H)
	}
	if e := g.Sub(20, 0, 3, 3); e.W != 0 || e.H != 0 {
		t.Errorf("empty Sub: %d×%d", e.W, e.H)
	}
	// Stats and the speckle estimator honour the stride of a window.
	_, _, mn, mx := Stats(s)
	if mn != float64(g.At(3, 2)) || mx != float64(g.At(6, 6)) {
		t.Errorf("Stats of window: min %g max %g", mn, mx)
	}
}

// TestColourTIFFAndJPEG: 16-bit RGB TIFF keeps 16-bit luma; a colour
// JPEG decodes to its Y channel (JFIF: Y is BT.601 luma).
func TestColourTIFFAndJPEG(t *testing.T) {
	m := image.NewRGBA64(image.Rect(0, 0, 2, 1))
	m.Set(0, 0, color.RGBA64{40000, 40000, 40000, 65535})
	m.Set(1, 0, color.RGBA64{65535, 0, 0, 65535})
	var b bytes.Buffer
	if err := tiff.Encode(&b, m, nil); err != nil {
		t.Fatal(err)
	}
	g, err := Decode(&b, Limits{})
	if err != nil {
		t.Fatal(err)
	}
	if g.Bits != 16 || g.At(0, 0) != 40000 || math.Abs(float64(g.At(1, 0))-0.299*65535) > 0.01 {
		t.Errorf("tiff16 rgb: bits %d, pixels %g %g", g.Bits, g.At(0, 0), g.At(1, 0))
	}
	c := image.NewRGBA(image.Rect(0, 0, 16, 16))
	for i := 0; i < len(c.Pix); i += 4 {
		c.Pix[i], c.Pix[i+1], c.Pix[i+2], c.Pix[i+3] = 200, 100, 50, 255
	}
	b.Reset()
	if err := jpeg.Encode(&b, c, &jpeg.Options{Quality: 100}); err != nil {
		t.Fatal(err)
	}
	g, err = Decode(&b, Limits{})
	if err != nil {
		t.Fatal(err)
	}
	want := 0.299*200 + 0.587*100 + 0.114*50
	if math.Abs(float64(g.At(8, 8))-want) > 2 {
		t.Errorf("colour jpeg: %g, want about %g", g.At(8, 8), want)
	}
}

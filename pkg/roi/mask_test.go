package roi

import (
	"math"
	"math/rand"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
)

// The area of a rasterised polygon (pixel count) approaches its exact area
// by the shoelace formula (Gauss's area formula), within its perimeter in px.
func TestPolygonArea(t *testing.T) {
	poly := [][2]float64{{10.3, 5.2}, {90.7, 12.1}, {70.2, 80.9}, {20.5, 60.4}}
	hole := [][2]float64{{40, 30}, {55, 30}, {55, 45}, {40, 45}}
	shoelace := func(p [][2]float64) (a, per float64) {
		for i := range p {
			q, r := p[i], p[(i+1)%len(p)]
			a += q[0]*r[1] - r[0]*q[1]
			per += math.Hypot(r[0]-q[0], r[1]-q[1])
		}
		return math.Abs(a) / 2, per
	}
	a, per := shoelace(poly)
	ah, _ := shoelace(hole)
	m, err := Spec{Polygon: poly, Holes: [][][2]float64{hole}}.Mask(100, 100)
	if err != nil {
		t.Fatal(err)
	}
	want := a - ah
	if d := math.Abs(float64(m.Count()) - want); d > per/4 {
		t.Errorf("polygon with hole: %d pixels, exact area %.1f (allowed ±%.1f)", m.Count(), want, per/4)
	}
	// The hole 40 ≤ x < 55, 30 ≤ y < 45 is outside; a point well inside is in.
	if m.Inside(47, 37) || !m.Inside(30, 40) {
		t.Error("hole or polygon interior misclassified")
	}
}

func TestRectAndRectInside(t *testing.T) {
	m, err := Spec{Rect: &[4]int{10, 20, 50, 40}}.Mask(64, 48)
	if err != nil {
		t.Fatal(err)
	}
	if m.Count() != 40*20 {
		t.Errorf("rect count %d, want 800", m.Count())
	}
	x0, y0, x1, y1 := m.Bounds()
	if [4]int{x0, y0, x1, y1} != [4]int{10, 20, 50, 40} {
		t.Errorf("bounds %v", [4]int{x0, y0, x1, y1})
	}
	cases := []struct {
		r    [4]int
		want bool
	}{
		{[4]int{10, 20, 49, 39}, true},
		{[4]int{10, 20, 50, 39}, false},
		{[4]int{9, 20, 49, 39}, false},
		{[4]int{30, 25, 30, 25}, true},
		{[4]int{-1, 0, 3, 3}, false},
		{[4]int{60, 40, 64, 47}, false},
	}
	for _, c := range cases {
		// Compare against the brute-force definition.
		brute := true
		for y := c.r[1]; y <= c.r[3]; y++ {
			for x := c.r[0]; x <= c.r[2]; x++ {
				brute = brute && m.Inside(x, y)
			}
		}
		if got := m.RectInside(c.r[0], c.r[1], c.r[2], c.r[3]); got != c.want || got != brute {
			t.Errorf("RectInside(%v) = %v, want %v (brute force %v)", c.r, got, c.want, brute)
		}
	}
}

func TestFromImageAndIntersect(t *testing.T) {
	g := imageio.NewGray(20, 10)
	for y := 2; y < 8; y++ {
		for x := 5; x < 15; x++ {
			g.Set(x, y, 255)
		}
	}
	g.Set(0, 0, 100) // below half of the maximum: outside
	m, err := FromImage(g, 20, 10)
	if err != nil {
		t.Fatal(err)
	}
	if m.Count() != 60 || m.Inside(0, 0) {
		t.Errorf("mask image: %d pixels inside, want 60", m.Count())
	}
	r, _ := Spec{Rect: &[4]int{0, 0, 10, 10}}.Mask(20, 10)
	in, err := m.Intersect(r)
	if err != nil || in.Count() != 30 {
		t.Errorf("intersection: %v pixels, err %v; want 30", in.Count(), err)
	}
	if _, err := FromImage(g, 21, 10); err == nil {
		t.Error("size mismatch accepted")
	}
	if _, err := FromImage(imageio.NewGray(4, 4), 4, 4); err == nil {
		t.Error("black mask accepted")
	}
}

func TestSpecErrors(t *testing.T) {
	cases := []Spec{
		{Rect: &[4]int{5, 5, 5, 9}},
		{Rect: &[4]int{0, 0, 200, 10}},
		{Polygon: [][2]float64{{0, 0}, {1, 1}}},
		{Polygon: [][2]float64{{0, 0}, {1, math.NaN()}, {3, 0}}},
		{Rect: &[4]int{0, 0, 10, 10}, Holes: [][][2]float64{{{-5, -5}, {20, -5}, {20, 20}, {-5, 20}}}}, // empty
	}
	for i, s := range cases {
		if _, err := s.Mask(100, 100); err == nil {
			t.Errorf("case %d: Mask succeeded, want error", i)
		}
	}
	// Several problems are all reported.
	err := Spec{Rect: &[4]int{3, 3, 1, 1}, Polygon: [][2]float64{{0, 0}}}.Validate(10, 10)
	if err == nil || len(err.(interface{ Unwrap() []error }).Unwrap()) != 2 {
		t.Errorf("Validate = %v, want two problems", err)
	}
	if m, err := (Spec{}).Mask(7, 5); err != nil || m.Count() != 35 {
		t.Errorf("empty Spec: %v, %v; want the whole image", m, err)
	}
}

// Full's summed-area table, written in closed form, is the one newMask
// builds from the pixels, and the mask counts every pixel.
func TestFullSums(t *testing.T) {
	for _, s := range [][2]int{{1, 1}, {1, 7}, {9, 1}, {13, 6}} {
		w, h := s[0], s[1]
		in := make([]bool, w*h)
		for i := range in {
			in[i] = true
		}
		got, want := Full(w, h), newMask(w, h, in)
		if got.n != want.n || len(got.sum) != len(want.sum) || got.box != want.box {
			t.Fatalf("%d×%d: %d pixels, %d sums, bounds %v; want %d, %d, %v", w, h, got.n, len(got.sum), got.box, want.n, len(want.sum), want.box)
		}
		for i := range want.sum {
			if got.sum[i] != want.sum[i] {
				t.Fatalf("%d×%d: sum[%d] = %d, want %d", w, h, i, got.sum[i], want.sum[i])
			}
		}
	}
}

// newMask's count, bounds and summed-area table, built in one pass row by
// row, are those of a direct scan of the pixels and of the definition
// sum(x, y) = #{inside pixels x' < x, y' < y}; Row returns each row.
// Random masks of several densities, with empty rows and columns, and an
// empty one.
func TestMaskBuildMatchesScan(t *testing.T) {
	r := rand.New(rand.NewSource(3))
	for _, c := range []struct {
		w, h int
		p    float64 // chance that a pixel is inside
	}{{1, 1, 1}, {17, 9, 0.5}, {23, 31, 0.02}, {40, 12, 0.9}, {8, 8, 0}} {
		in := make([]bool, c.w*c.h)
		for i := range in {
			in[i] = r.Float64() < c.p
		}
		m := newMask(c.w, c.h, in)
		n, box := 0, [4]int{c.w, c.h, 0, 0}
		for y := 0; y < c.h; y++ {
			for x := 0; x < c.w; x++ {
				if in[y*c.w+x] {
					n++
					box = [4]int{min(box[0], x), min(box[1], y), max(box[2], x+1), max(box[3], y+1)}
				}
			}
			if got := m.Row(y); len(got) != c.w || &got[0] != &in[y*c.w] {
				t.Fatalf("%d×%d: Row(%d) is not the mask's row", c.w, c.h, y)
			}
		}
		if n == 0 {
			box = [4]int{}
		}
		x0, y0, x1, y1 := m.Bounds()
		if m.Count() != n || [4]int{x0, y0, x1, y1} != box {
			t.Errorf("%d×%d p %v: count %d bounds %v, want %d %v", c.w, c.h, c.p, m.Count(), [4]int{x0, y0, x1, y1}, n, box)
		}
		for y := 0; y <= c.h; y++ {
			for x := 0; x <= c.w; x++ {
				var want int32
				for yy := 0; yy < y; yy++ {
					for xx := 0; xx < x; xx++ {
						if in[yy*c.w+xx] {
							want++
						}
					}
				}
				if got := m.sum[y*(c.w+1)+x]; got != want {
					t.Fatalf("%d×%d p %v: sum(%d, %d) = %d, want %d", c.w, c.h, c.p, x, y, got, want)
				}
			}
		}
	}
}

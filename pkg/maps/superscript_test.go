package maps

import (
	"image"
	"image/color"
	"image/draw"
	"testing"
)

// inkRows returns the first and last rows holding ink of s drawn in black
// on white with its baseline at y = 40, and whether any ink was drawn.
func inkRows(t *testing.T, s string) (top, bottom, left, right int, ok bool) {
	t.Helper()
	face, err := newFace()
	if err != nil {
		t.Fatal(err)
	}
	defer face.Close()
	img := image.NewRGBA(image.Rect(0, 0, 120, 60))
	draw.Draw(img, img.Bounds(), image.NewUniform(color.White), image.Point{}, draw.Src)
	drawText(img, face, 10, 40, s, color.Black)
	top, bottom, left, right = 60, -1, 120, -1
	for y := 0; y < 60; y++ {
		for x := 0; x < 120; x++ {
			if r, _, _, _ := img.At(x, y).RGBA(); r < 0x8000 {
				top, bottom = min(top, y), max(bottom, y)
				left, right = min(left, x), max(right, x)
				ok = true
			}
		}
	}
	return
}

// TestSuperscriptT: the label font (Go Regular) has no glyph for ᵀ
// (U+1D40), which quantity descriptions use (FᵀF); it is drawn as a
// smaller T raised above the baseline, not as the font's missing-glyph
// box, and its width counts in textWidth. ² and ⁻¹, which the font has,
// are its own glyphs.
func TestSuperscriptT(t *testing.T) {
	face, err := newFace()
	if err != nil {
		t.Fatal(err)
	}
	defer face.Close()
	if _, ok := face.(*superFace).Face.GlyphAdvance('ᵀ'); ok {
		t.Log("the label font has its own ᵀ now; the fallback is unused")
	}
	tTop, tBottom, _, _, ok := inkRows(t, "T")
	if !ok {
		t.Fatal("T draws no ink")
	}
	sTop, sBottom, sLeft, sRight, ok := inkRows(t, "ᵀ")
	if !ok {
		t.Fatal("ᵀ draws no ink")
	}
	if sBottom >= 40-3 || sTop > tTop+1 {
		t.Errorf("ᵀ inks rows %d–%d, T rows %d–%d (baseline 40); want a raised letter ending well above the baseline", sTop, sBottom, tTop, tBottom)
	}
	if h, th := sBottom-sTop, tBottom-tTop; float64(h) > 0.85*float64(th) || float64(h) < 0.5*float64(th) {
		t.Errorf("ᵀ is %d px high, T %d px; want about %.0f %% of it", h, th, 100*superScale)
	}
	if w := textWidth(face, "FᵀF") - textWidth(face, "FF"); w <= 0 || sRight-sLeft <= 0 {
		t.Errorf("ᵀ adds %d px to the width of FᵀF", w)
	}
	// The missing-glyph box would ink a rectangle, with ink at both sides
	// of its middle row; a T's middle row is its stem, near the centre.
	if stem := middleInk(t, "ᵀ"); len(stem) == 0 || stem[0] < sLeft+(sRight-sLeft)/4 || stem[len(stem)-1] > sRight-(sRight-sLeft)/4 {
		t.Errorf("ᵀ's middle row inks columns %v within %d–%d; want a centred stem, not a box", stem, sLeft, sRight)
	}
	for _, s := range []string{"²", "⁻¹"} {
		if _, ok := face.GlyphAdvance([]rune(s)[0]); !ok {
			t.Errorf("the label font lacks %q", s)
		}
	}
}

// middleInk returns the inked columns of the middle ink row of s, drawn as
// in inkRows.
func middleInk(t *testing.T, s string) []int {
	t.Helper()
	top, bottom, _, _, ok := inkRows(t, s)
	if !ok {
		return nil
	}
	face, err := newFace()
	if err != nil {
		t.Fatal(err)
	}
	defer face.Close()
	img := image.NewRGBA(image.Rect(0, 0, 120, 60))
	draw.Draw(img, img.Bounds(), image.NewUniform(color.White), image.Point{}, draw.Src)
	drawText(img, face, 10, 40, s, color.Black)
	var cols []int
	y := (top + bottom + 1) / 2
	for x := 0; x < 120; x++ {
		if r, _, _, _ := img.At(x, y).RGBA(); r < 0x8000 {
			cols = append(cols, x)
		}
	}
	return cols
}

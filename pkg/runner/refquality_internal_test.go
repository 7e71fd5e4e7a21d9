package runner

import (
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
)

// TestRefQuality: the key of a reference's quality measures changes with
// any pixel, the mask and the parameters, and not with a copy of the same
// image; the runner keeps the last maxRefQuality references.
func TestRefQuality(t *testing.T) {
	img := func(v float32) *imageio.Gray {
		g := imageio.NewGray(5, 4)
		for i := range g.Pix {
			g.Pix[i] = float32(i)
		}
		g.Pix[7] = v
		return g
	}
	params := []byte(`{"subset": 31}`)
	k := refQualityKey(img(7), nil, params)
	if refQualityKey(img(7), nil, params) != k {
		t.Errorf("the same image gives another key")
	}
	for name, other := range map[string][32]byte{
		"one pixel":  refQualityKey(img(7.5), nil, params),
		"a mask":     refQualityKey(img(7), img(1), params),
		"parameters": refQualityKey(img(7), nil, []byte(`{"subset": 31, "roi": {"rect": [0, 0, 3, 3]}}`)),
	} {
		if other == k {
			t.Errorf("changing %s keeps the key", name)
		}
	}
	var c refQuality
	for i := range maxRefQuality + 1 {
		c.put(refQualityKey(img(float32(100+i)), nil, params), quality.Measures{Pixels: i + 1})
	}
	if c.get(refQualityKey(img(100), nil, params)) != nil {
		t.Errorf("the oldest reference is still kept beyond %d", maxRefQuality)
	}
	for _, i := range []int{1, maxRefQuality} {
		if m := c.get(refQualityKey(img(float32(100+i)), nil, params)); m == nil || m.Pixels != i+1 {
			t.Errorf("reference %d: %+v, want its measures", i, m)
		}
	}
}

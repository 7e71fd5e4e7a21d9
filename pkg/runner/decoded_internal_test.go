package runner

import (
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
)

// TestDecodedSet checks the bound of the decoded series images: the least
// recently used go first once the pixels exceed maxDecodedPixels, a use
// keeps an image, and an image larger than the bound is not kept.
func TestDecodedSet(t *testing.T) {
	const side = 1 << 11 // 4 Mpx: three fit
	var c decodedSet
	img := func() *imageio.Gray { return imageio.NewGray(side, side) }
	for _, k := range []string{"a", "b", "c"} {
		c.put(k, img())
	}
	if c.get("a") == nil {
		t.Fatal("a dropped with three images of the bound's size")
	}
	c.put("d", img()) // drops b, the least recently used
	for k, want := range map[string]bool{"a": true, "b": false, "c": true, "d": true} {
		if got := c.get(k) != nil; got != want {
			t.Errorf("after a fourth image, %s kept %v, want %v", k, got, want)
		}
	}
	c.put("huge", imageio.NewGray(side, 3*side+1))
	if c.get("huge") != nil {
		t.Error("an image larger than the bound was kept")
	}
	if c.get("a") == nil || c.get("d") == nil {
		t.Error("an image too large to keep dropped the others")
	}
}

package runner

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"log/slog"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service/embedded"
)

// TestPrime: a primed image is what the next load of its blob key gets,
// once, without decoding (here the key holds another image, so a decode
// would show); an expired one, one beyond maxPrimed and an unprimed one
// are decoded from the stored bytes as usual.
func TestPrime(t *testing.T) {
	be, err := embedded.Open(t.TempDir(), 4)
	if err != nil {
		t.Fatal(err)
	}
	defer be.Close()
	s, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: 1, Logger: slog.New(slog.NewJSONHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	stored := imageio.NewGray(8, 6)
	for i := range stored.Pix {
		stored.Pix[i] = float32(i)
	}
	var png bytes.Buffer
	if err := imageio.WritePNG(&png, stored, 8); err != nil {
		t.Fatal(err)
	}
	key := func(i int) string { return fmt.Sprintf("jobs/j%d/in/reference", i) }
	for i := range maxPrimed + 2 {
		if err := s.blobs.Put(ctx, key(i), bytes.NewReader(png.Bytes())); err != nil {
			t.Fatal(err)
		}
	}
	primed := imageio.NewGray(8, 6)
	for i := range maxPrimed + 1 {
		s.Prime(key(i), primed)
	}
	// Key 1 waited too long.
	s.primed.mu.Lock()
	v := s.primed.m[key(1)]
	v.at = v.at.Add(-2 * primedTTL)
	s.primed.m[key(1)] = v
	s.primed.mu.Unlock()
	s.Unprime(key(2))

	load := func(i int) *imageio.Gray {
		g, err := s.LoadImage(ctx, key(i))
		if err != nil {
			t.Fatal(err)
		}
		return g
	}
	if g := load(0); g != primed {
		t.Errorf("first load of a primed key decoded the blob; want the primed image")
	}
	for _, i := range []int{0, 1, 2, maxPrimed, maxPrimed + 1} {
		if g := load(i); g == primed || g.Pix[7] != 7 {
			t.Errorf("key %d (loaded again, expired, unprimed, beyond %d, never primed): got the primed image or a wrong decode", i, maxPrimed)
		}
	}
	if g := load(3); g != primed {
		t.Errorf("key 3 was primed and not taken; want the primed image")
	}
}

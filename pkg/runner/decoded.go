package runner

import (
	"context"
	"sync"

	"github.com/mottledic/mottle/pkg/imageio"
)

// Decoded series images: a worker decodes a series' reference and a frame
// when it solves the frame ahead, and again when it adds the frame to the
// state (issue 21); the reference again for every frame. The bytes under
// a series' reference key and a frame's input key never change, so the
// runner keeps the last few images it decoded for series frames and
// reads them from memory instead. Results do not depend on it.

// maxDecodedPixels bounds the pixels the set holds (4 bytes each): the
// three images of a frame (reference, previous frame, frame) of up to
// 4 Mpx each.
const maxDecodedPixels = 3 << 22

// decodedSet holds recently decoded series images by blob key, the most
// recently used last.
type decodedSet struct {
	mu   sync.Mutex
	keys []string
	imgs map[string]*imageio.Gray
}

// get returns the image decoded for key, or nil.
func (c *decodedSet) get(key string) *imageio.Gray {
	c.mu.Lock()
	defer c.mu.Unlock()
	g := c.imgs[key]
	if g != nil {
		c.touch(key)
	}
	return g
}

// touch moves key to the end of the use order; the caller holds mu.
func (c *decodedSet) touch(key string) {
	for i, k := range c.keys {
		if k == key {
			c.keys = append(append(c.keys[:i:i], c.keys[i+1:]...), key)
			return
		}
	}
	c.keys = append(c.keys, key)
}

// put keeps g, decoded from the bytes under key, dropping the least
// recently used images beyond maxDecodedPixels; an image larger than
// that is not kept.
func (c *decodedSet) put(key string, g *imageio.Gray) {
	if g.W*g.H > maxDecodedPixels {
		return
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.imgs == nil {
		c.imgs = map[string]*imageio.Gray{}
	}
	c.imgs[key] = g
	c.touch(key)
	n := 0
	for _, im := range c.imgs {
		n += im.W * im.H
	}
	for n > maxDecodedPixels && len(c.keys) > 1 {
		old := c.imgs[c.keys[0]]
		n -= old.W * old.H
		delete(c.imgs, c.keys[0])
		c.keys = c.keys[1:]
	}
}

// loadSeriesImage is LoadImageAs (o nil: LoadImage) for the images of a
// series frame, through the set of decoded series images. The images
// handed out are shared: no caller changes them.
func (s *Runner) loadSeriesImage(ctx context.Context, key string, o *imageio.Orientation) (*imageio.Gray, error) {
	g := s.decoded.get(key)
	if g == nil {
		var err error
		if g, err = s.loadStored(ctx, key); err != nil {
			return nil, err
		}
		s.decoded.put(key, g)
	}
	if o == nil {
		return upright(key, g, g.Orientation)
	}
	return upright(key, g, *o)
}

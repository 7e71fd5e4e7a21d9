package runner

import (
	"crypto/sha256"
	"encoding/binary"
	"math"
	"sync"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
)

// maxRefQuality is how many references' quality measures the runner
// keeps: analyses of many deformed images against one reference measure
// that reference once.
const maxRefQuality = 16

// refQuality keeps the quality measures of recent references by
// refQualityKey, dropping the oldest beyond maxRefQuality.
type refQuality struct {
	mu    sync.Mutex
	m     map[[32]byte]quality.Measures
	order [][32]byte
}

func (c *refQuality) get(k [32]byte) *quality.Measures {
	c.mu.Lock()
	defer c.mu.Unlock()
	if m, ok := c.m[k]; ok {
		return &m
	}
	return nil
}

func (c *refQuality) put(k [32]byte, m quality.Measures) {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.m == nil {
		c.m = map[[32]byte]quality.Measures{}
	}
	if _, ok := c.m[k]; ok {
		return
	}
	if len(c.order) == maxRefQuality {
		delete(c.m, c.order[0])
		c.order = c.order[1:]
	}
	c.m[k] = m
	c.order = append(c.order, k)
}

// refQualityKey is the SHA-256 of what a reference's quality measures
// depend on: its size, bit depth and pixels, the mask image's, and the
// parameters (their ROI; the whole document, to be safe).
func refQualityKey(ref, mask *imageio.Gray, params []byte) [32]byte {
	h := sha256.New()
	var buf [8]byte
	img := func(g *imageio.Gray) {
		if g == nil {
			h.Write([]byte{0})
			return
		}
		for _, v := range []int{g.W, g.H, g.Bits} {
			binary.LittleEndian.PutUint64(buf[:], uint64(v))
			h.Write(buf[:])
		}
		row := make([]byte, 4*g.W)
		for y := 0; y < g.H; y++ {
			for x, v := range g.Pix[y*g.Stride : y*g.Stride+g.W] {
				binary.LittleEndian.PutUint32(row[4*x:], math.Float32bits(v))
			}
			h.Write(row)
		}
	}
	img(ref)
	img(mask)
	h.Write(params)
	var k [32]byte
	h.Sum(k[:0])
	return k
}

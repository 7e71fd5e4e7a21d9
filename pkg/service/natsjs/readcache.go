package natsjs

import "sync"

// readCacheBytes bounds the contents a process keeps in its readCache:
// the series states and solutions of about a dozen frames of 512×512 px.
const readCacheBytes = 32 << 20

// readCache keeps the contents of objects this process wrote or read
// lately, each with the NUID and digest of the object it was. Get still
// reads the object's metadata from the stream's leader first, and uses an
// entry only when that names the same NUID and digest, so it returns what
// a read of the chunks would; it skips only the chunk reads, the larger
// part of a read for the server (a message get, answered in base64 JSON)
// and for this process. A frame's worker mostly reads what it wrote: the
// solution of a frame it solved ahead, and often the series state of the
// frame before, when it computed that one too.
type readCache struct {
	mu    sync.Mutex
	max   int
	size  int
	tick  uint64
	items map[string]*cached
}

type cached struct {
	nuid, digest string
	data         []byte
	used         uint64
}

func newReadCache(max int) *readCache { return &readCache{max: max, items: map[string]*cached{}} }

// get returns the contents kept for key if they are those of the object
// nuid with digest, or nil.
func (c *readCache) get(key, nuid, digest string) []byte {
	c.mu.Lock()
	defer c.mu.Unlock()
	it, ok := c.items[key]
	if !ok || it.nuid != nuid || it.digest != digest {
		return nil
	}
	c.tick++
	it.used = c.tick
	return it.data
}

// put keeps data, the contents of the object nuid with digest, for key,
// dropping the entries used least recently beyond the bound. Contents
// larger than a quarter of the bound are not kept. data must not change
// afterwards.
func (c *readCache) put(key, nuid, digest string, data []byte) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.dropLocked(key)
	if len(data) > c.max/4 {
		return
	}
	c.tick++
	c.items[key] = &cached{nuid, digest, data, c.tick}
	c.size += len(data)
	for c.size > c.max {
		var old string
		var oldest uint64
		for k, it := range c.items {
			if old == "" || it.used < oldest {
				old, oldest = k, it.used
			}
		}
		c.dropLocked(old)
	}
}

// drop forgets key.
func (c *readCache) drop(key string) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.dropLocked(key)
}

func (c *readCache) dropLocked(key string) {
	if it, ok := c.items[key]; ok {
		c.size -= len(it.data)
		delete(c.items, key)
	}
}

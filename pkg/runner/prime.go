package runner

import (
	"sync"
	"time"

	"github.com/mottledic/mottle/pkg/imageio"
)

// Primed images: an HTTP handler decodes every uploaded image to check it
// before it stores the bytes, and the job then decodes the same bytes
// again. Prime hands the first decode over, so a job that starts in this
// process soon after reads no image twice.
const (
	// maxPrimed bounds the images held at once (their pixels stay in
	// memory until their job starts or they expire).
	maxPrimed = 8
	// primedTTL is how long a primed image waits for its job.
	primedTTL = time.Minute
)

// primedSet holds primed images by blob key.
type primedSet struct {
	mu sync.Mutex
	m  map[string]primedImage
}

type primedImage struct {
	g  *imageio.Gray
	at time.Time
}

// Prime gives the runner g, decoded by the caller from exactly the bytes
// it stored under the blob key (imageio.Decode with the runner's Limits,
// the pixels as stored, not turned by an orientation), for the job that
// loads that blob. The job takes it instead of decoding; the caller must
// not change g afterwards. Images wait at most primedTTL, and beyond
// maxPrimed waiting images Prime keeps nothing: the job then decodes the
// stored bytes as usual. Results do not depend on it.
func (s *Runner) Prime(key string, g *imageio.Gray) {
	if g == nil {
		return
	}
	p := &s.primed
	p.mu.Lock()
	defer p.mu.Unlock()
	now := time.Now()
	for k, v := range p.m {
		if now.Sub(v.at) > primedTTL {
			delete(p.m, k)
		}
	}
	if p.m == nil {
		p.m = map[string]primedImage{}
	}
	if len(p.m) < maxPrimed {
		p.m[key] = primedImage{g, now}
	}
}

// takePrimed returns and forgets the image primed for key, or nil.
func (s *Runner) takePrimed(key string) *imageio.Gray {
	p := &s.primed
	p.mu.Lock()
	defer p.mu.Unlock()
	v, ok := p.m[key]
	if !ok {
		return nil
	}
	delete(p.m, key)
	if time.Since(v.at) > primedTTL {
		return nil
	}
	return v.g
}

// Unprime drops the images primed for keys, when their job was not
// accepted after all or already existed.
func (s *Runner) Unprime(keys ...string) {
	p := &s.primed
	p.mu.Lock()
	defer p.mu.Unlock()
	for _, k := range keys {
		delete(p.m, k)
	}
}

package service

import (
	"context"
	"fmt"
	"io"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"sync/atomic"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// reserveName is the file in Config.DataDir that holds the space reserve.
const reserveName = ".mottle-reserve"

// diskGuard watches the free space of the data directory and keeps a
// reserve file there. A write that fails for lack of space gives the
// reserve up, so that the outcome of the jobs in flight can still be
// recorded; the reserve is made again once space has returned.
type diskGuard struct {
	dir     string
	minFree int64
	reserve int64

	mu   sync.Mutex
	held bool // the reserve file exists with its full size

	full     atomic.Uint64 // writes that failed for lack of space
	released atomic.Uint64 // times the reserve was given up
}

// newDiskGuard returns the guard of cfg.DataDir, or nil when it is empty.
func newDiskGuard(cfg *Config) *diskGuard {
	if cfg.DataDir == "" {
		return nil
	}
	return &diskGuard{dir: cfg.DataDir, minFree: cfg.MinFreeBytes, reserve: max(cfg.ReserveBytes, 0)}
}

// free returns the bytes available to the service in the data directory.
func (g *diskGuard) free() (int64, error) {
	n, err := freeBytes(g.dir)
	if err != nil {
		return 0, fmt.Errorf("free space of the data directory %s: %w", g.dir, err)
	}
	return n, nil
}

// low reports whether less than the threshold is free, with the free
// bytes. It first makes the reserve again if space allows. A free space
// that cannot be read counts as not low (the writes themselves still
// report a full disk).
func (g *diskGuard) low() (bool, int64) {
	g.refresh()
	n, err := g.free()
	if err != nil {
		return false, -1
	}
	return n < g.minFree, n
}

// refresh writes the reserve file when it is missing and at least the
// threshold would stay free beside it.
func (g *diskGuard) refresh() {
	if g.reserve == 0 {
		return
	}
	g.mu.Lock()
	defer g.mu.Unlock()
	if g.held {
		return
	}
	n, err := g.free()
	if err != nil || n < g.minFree+g.reserve {
		return
	}
	if err := writeReserve(filepath.Join(g.dir, reserveName), g.reserve); err != nil {
		return // tried again on the next check
	}
	g.held = true
}

// writeReserve writes size zero bytes to path (real blocks, not a sparse
// file, so that the space is taken) and syncs it.
func writeReserve(path string, size int64) error {
	f, err := os.OpenFile(path, os.O_CREATE|os.O_WRONLY|os.O_TRUNC, 0o600)
	if err != nil {
		return err
	}
	buf := make([]byte, 64<<10)
	for left := size; left > 0 && err == nil; left -= int64(len(buf)) {
		_, err = f.Write(buf[:min(left, int64(len(buf)))])
	}
	if err == nil {
		err = f.Sync()
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		os.Remove(path)
	}
	return err
}

// noSpace records a write that failed for lack of space and gives the
// reserve up. It reports whether space was freed (a retry may succeed).
func (g *diskGuard) noSpace() bool {
	g.full.Add(1)
	g.mu.Lock()
	defer g.mu.Unlock()
	if !g.held {
		return false
	}
	g.held = false
	g.released.Add(1)
	return os.Remove(filepath.Join(g.dir, reserveName)) == nil
}

// reserveHeld returns the size of the reserve now held.
func (g *diskGuard) reserveHeld() int64 {
	g.mu.Lock()
	defer g.mu.Unlock()
	if g.held {
		return g.reserve
	}
	return 0
}

func isNoSpace(err error) bool { return jobs.IsNoSpace(err) }

func noSpaceErr(what string, err error) error { return jobs.NoSpace(what, err) }

// noSpaceProblem is the 507 answer to a write that found no space.
func noSpaceProblem(err error) *Problem {
	return problem(http.StatusInsufficientStorage, "insufficient-storage", "Insufficient storage",
		err.Error()+"; nothing was stored and nothing stored earlier was changed. "+
			"Ask the operator to free space (delete old analyses, or set --retention); the service takes work again as soon as there is room, without a restart")
}

// lowDiskProblem answers requests that would store data while the free
// space is below the threshold.
func (g *diskGuard) lowDiskProblem(free int64) *Problem {
	return problem(http.StatusInsufficientStorage, "low-disk-space", "Insufficient storage",
		fmt.Sprintf("%s free in the data directory, below the threshold of %s (--min-free-mb); the service accepts no new uploads until space is freed, "+
			"and takes work again without a restart once it is", mib(free), mib(g.minFree)))
}

func mib(n int64) string { return fmt.Sprintf("%.1f MiB", float64(n)/(1<<20)) }

// storesData reports whether r would store new data (an upload or a new
// resource), so that it is refused while the disk is low. Reads, cancels
// and deletes still work: deleting is how space is freed.
func storesData(r *http.Request) bool {
	if r.Method != http.MethodPost {
		return false
	}
	p := r.URL.Path
	switch {
	case p == "/v1/stream-tickets", p == "/v1/images/check", p == "/v1/calibrations", strings.HasSuffix(p, "/cancel"):
		return false
	}
	return strings.HasPrefix(p, "/v1/")
}

// guardedBlobs reports writes that fail for lack of space to the guard.
type guardedBlobs struct {
	jobs.Blobs
	g *diskGuard
}

func (b guardedBlobs) Put(ctx context.Context, key string, r io.Reader) error {
	err := b.Blobs.Put(ctx, key, r)
	if isNoSpace(err) {
		b.g.noSpace()
		return noSpaceErr("storing "+key, err)
	}
	return err
}

func (b guardedBlobs) Create(ctx context.Context, key string, r io.Reader) error {
	err := b.Blobs.Create(ctx, key, r)
	if isNoSpace(err) {
		b.g.noSpace()
		return noSpaceErr("storing "+key, err)
	}
	return err
}

// DeleteKey removes the blob under key alone by the guarded blobs' own
// DeleteKey when they have one (jobs.KeyDeleter: a distributed store's,
// which does not list the store), which the embedding would hide, so that
// jobs.DeleteKey through the guard costs what it costs without it.
func (b guardedBlobs) DeleteKey(ctx context.Context, key string) error {
	return jobs.DeleteKey(ctx, b.Blobs, key)
}

// guardedStore reports record writes that fail for lack of space to the
// guard. An update of an existing record (the outcome of a job, a frame
// appended) is tried once more after the reserve is given up: the state
// of work already accepted must be recorded. New records are not retried:
// their request is answered 507.
type guardedStore struct {
	jobs.Store
	g *diskGuard
}

func (s guardedStore) CreateJob(ctx context.Context, j *jobs.Job) error {
	return s.check("job record "+j.ID, s.Store.CreateJob(ctx, j))
}

func (s guardedStore) CreateSeries(ctx context.Context, sr *jobs.Series) error {
	return s.check("series record "+sr.ID, s.Store.CreateSeries(ctx, sr))
}

func (s guardedStore) CreateKey(ctx context.Context, k *jobs.Key) error {
	return s.check("idempotency key record", s.Store.CreateKey(ctx, k))
}

func (s guardedStore) PutKey(ctx context.Context, k *jobs.Key) error {
	return s.check("idempotency key record", s.Store.PutKey(ctx, k))
}

func (s guardedStore) UpdateJob(ctx context.Context, id string, fn func(*jobs.Job) error) (*jobs.Job, error) {
	j, err := s.Store.UpdateJob(ctx, id, fn)
	if isNoSpace(err) && s.g.noSpace() {
		j, err = s.Store.UpdateJob(ctx, id, fn)
	}
	return j, s.check("job record "+id, err)
}

func (s guardedStore) UpdateSeries(ctx context.Context, id string, fn func(*jobs.Series) error) (*jobs.Series, error) {
	sr, err := s.Store.UpdateSeries(ctx, id, fn)
	if isNoSpace(err) && s.g.noSpace() {
		sr, err = s.Store.UpdateSeries(ctx, id, fn)
	}
	return sr, s.check("series record "+id, err)
}

func (s guardedStore) check(what string, err error) error {
	if isNoSpace(err) {
		s.g.noSpace()
		return noSpaceErr(what, err)
	}
	return err
}

// guardBackend returns b with its store and blobs reporting full-disk
// writes to g (b itself when g is nil).
func guardBackend(b *jobs.Backend, g *diskGuard) *jobs.Backend {
	if g == nil {
		return b
	}
	c := *b
	c.Store = guardedStore{b.Store, g}
	c.Blobs = guardedBlobs{b.Blobs, g}
	return &c
}

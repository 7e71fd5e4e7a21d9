package jobs

import (
	"context"
	"errors"
	"fmt"
	"io"
	"sync"
	"testing"
	"time"
)

// memBlobs is a Blobs in memory that fails the keys in fail, after a
// pause of delay[key], and counts the Puts running at once.
type memBlobs struct {
	mu        sync.Mutex
	m         map[string][]byte
	fail      map[string]bool
	delay     map[string]time.Duration
	now, peak int
}

func (b *memBlobs) Put(ctx context.Context, key string, r io.Reader) error {
	b.mu.Lock()
	b.now++
	b.peak = max(b.peak, b.now)
	b.mu.Unlock()
	defer func() { b.mu.Lock(); b.now--; b.mu.Unlock() }()
	time.Sleep(b.delay[key])
	if b.fail[key] {
		return fmt.Errorf("blob %s: %w", key, errors.ErrUnsupported)
	}
	data, err := io.ReadAll(r)
	if err != nil {
		return err
	}
	b.mu.Lock()
	defer b.mu.Unlock()
	b.m[key] = data
	return nil
}

func (b *memBlobs) Create(ctx context.Context, key string, r io.Reader) error {
	return errors.ErrUnsupported
}

func (b *memBlobs) Get(ctx context.Context, key string) (io.ReadCloser, error) {
	return nil, ErrNotFound
}

func (b *memBlobs) Delete(ctx context.Context, prefix string) error { return nil }

// TestPutAll checks that PutAll stores every file under its key, that the
// error is the first failing file's by name however the Puts finish
// (the later name fails first here), and that no more than maxPuts run at
// once.
func TestPutAll(t *testing.T) {
	files := map[string][]byte{}
	for i := range 2 * maxPuts {
		files[fmt.Sprintf("f%02d", i)] = []byte{byte(i)}
	}
	key := func(name string) string { return "jobs/x/out/" + name }
	for _, c := range []struct {
		name    string
		fail    []string
		wantErr string
	}{
		{"all stored", nil, ""},
		{"one fails", []string{"f03"}, "blob jobs/x/out/f03: unsupported operation"},
		{"first by name", []string{"f02", "f01"}, "blob jobs/x/out/f01: unsupported operation"},
	} {
		t.Run(c.name, func(t *testing.T) {
			b := &memBlobs{m: map[string][]byte{}, fail: map[string]bool{}, delay: map[string]time.Duration{}}
			for _, n := range c.fail {
				b.fail[key(n)] = true
			}
			b.delay[key("f01")] = 20 * time.Millisecond // finishes after f02
			for n := range files {
				if n != "f01" {
					b.delay[key(n)] = time.Millisecond
				}
			}
			err := PutAll(context.Background(), b, files, key)
			switch {
			case c.wantErr == "" && err != nil:
				t.Fatalf("PutAll: %v", err)
			case c.wantErr != "" && (err == nil || err.Error() != c.wantErr):
				t.Fatalf("PutAll error %v, want %q", err, c.wantErr)
			}
			for n, data := range files {
				got, ok := b.m[key(n)]
				if b.fail[key(n)] {
					if ok {
						t.Errorf("%s stored though its Put failed", n)
					}
					continue
				}
				if !ok || string(got) != string(data) {
					t.Errorf("%s: stored %v (%v), want %v", n, got, ok, data)
				}
			}
			if b.peak > maxPuts || b.peak < 2 {
				t.Errorf("%d Puts ran at once, want 2 to %d", b.peak, maxPuts)
			}
		})
	}
}

package service

import (
	"context"
	"io"
	"testing"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// keyBlobs is a jobs.Blobs with a DeleteKey of its own (as natsjs's) that
// records the deletions asked of it.
type keyBlobs struct{ calls []string }

func (k *keyBlobs) Put(context.Context, string, io.Reader) error    { return nil }
func (k *keyBlobs) Create(context.Context, string, io.Reader) error { return nil }
func (k *keyBlobs) Get(context.Context, string) (io.ReadCloser, error) {
	return nil, jobs.ErrNotFound
}
func (k *keyBlobs) Delete(_ context.Context, prefix string) error {
	k.calls = append(k.calls, "Delete "+prefix)
	return nil
}
func (k *keyBlobs) DeleteKey(_ context.Context, key string) error {
	k.calls = append(k.calls, "DeleteKey "+key)
	return nil
}

// TestGuardKeepsDeleteKey: the disk guard (on with a data directory, the
// API node of a cluster too) wraps the blobs; jobs.DeleteKey through it
// must still reach the backend's DeleteKey, not its Delete of a prefix,
// which on NATS lists the whole object store.
func TestGuardKeepsDeleteKey(t *testing.T) {
	kb := &keyBlobs{}
	b := guardBackend(&jobs.Backend{Blobs: kb}, &diskGuard{dir: t.TempDir()})
	const key = "series/s/state/000001.bin"
	if err := jobs.DeleteKey(context.Background(), b.Blobs, key); err != nil {
		t.Fatal(err)
	}
	if len(kb.calls) != 1 || kb.calls[0] != "DeleteKey "+key {
		t.Errorf("calls %v, want [DeleteKey %s]", kb.calls, key)
	}
}

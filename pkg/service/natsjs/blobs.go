package natsjs

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/base64"
	"errors"
	"fmt"
	"io"
	"sort"
	"strings"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// Blobs is a jobs.Blobs on a JetStream object store: one object per key.
// An object store Put is atomic (its metadata is published after every
// chunk), so a reader sees the old or the new contents, never a part.
//
// Writes are idempotent by SHA-256 content hash: a Put of the contents a
// key already holds writes nothing. Result files (keys with an /out/
// element, see jobs.ResultKey) are written once: a later Put under the
// same key, from a job computed again after a redelivery, is dropped and
// the first answer kept.
type Blobs struct {
	obj jetstream.ObjectStore
}

// digest formats a SHA-256 sum as the object store does.
func digest(sum []byte) string {
	return "SHA-256=" + base64.URLEncoding.EncodeToString(sum)
}

// writeOnce reports whether key names a result file.
func writeOnce(key string) bool {
	return strings.Contains(key, "/out/")
}

// Put implements jobs.Blobs. The contents are read into memory first, so
// that the write can be retried through a node failure.
func (b *Blobs) Put(ctx context.Context, key string, r io.Reader) error {
	if !jobs.ValidKey(key) {
		return fmt.Errorf("blob key %q: not a list of names from [A-Za-z0-9._-] separated by /", key)
	}
	data, err := io.ReadAll(r)
	if err != nil {
		return fmt.Errorf("blob %s: %w", key, err)
	}
	sum := sha256.Sum256(data)
	err = retry(ctx, func(ctx context.Context) error {
		info, err := b.obj.GetInfo(ctx, key)
		switch {
		case errors.Is(err, jetstream.ErrObjectNotFound):
		case err != nil:
			return err
		case writeOnce(key) || info.Digest == digest(sum[:]):
			return nil // written before: keep the first answer
		}
		_, err = b.obj.Put(ctx, jetstream.ObjectMeta{Name: key}, bytes.NewReader(data))
		return err
	})
	if err != nil {
		return fmt.Errorf("blob %s: %w", key, err)
	}
	return nil
}

// Get implements jobs.Blobs. The object is read whole, within a time
// limit, and the read retried if a node stops in the middle, so a reader
// never waits on a stalled transfer; the object store checks the content
// hash at the end of each read.
func (b *Blobs) Get(ctx context.Context, key string) (io.ReadCloser, error) {
	if !jobs.ValidKey(key) {
		return nil, fmt.Errorf("blob key %q: not a list of names from [A-Za-z0-9._-] separated by /", key)
	}
	var data []byte
	err := retryWithin(ctx, getTimeout, func(ctx context.Context) error {
		var err error
		data, err = b.obj.GetBytes(ctx, key)
		return err
	})
	if errors.Is(err, jetstream.ErrObjectNotFound) {
		return nil, fmt.Errorf("blob %s: %w", key, jobs.ErrNotFound)
	}
	if err != nil {
		return nil, fmt.Errorf("blob %s: %w", key, err)
	}
	return io.NopCloser(bytes.NewReader(data)), nil
}

// getTimeout bounds one read of an object (at least 20 MB/s for the
// largest images the service accepts).
const getTimeout = 15 * time.Second

// Delete implements jobs.Blobs. It lists the store to find the keys under
// prefix, so its cost grows with the number of objects.
func (b *Blobs) Delete(ctx context.Context, prefix string) error {
	if !jobs.ValidKey(prefix) {
		return fmt.Errorf("blob key %q: not a list of names from [A-Za-z0-9._-] separated by /", prefix)
	}
	list, err := b.list(ctx)
	if errors.Is(err, jetstream.ErrNoObjectsFound) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("delete blobs %s: %w", prefix, err)
	}
	var errs []error
	for _, info := range list {
		if info.Name == prefix || strings.HasPrefix(info.Name, prefix+"/") {
			name := info.Name
			err := retry(ctx, func(ctx context.Context) error { return b.obj.Delete(ctx, name) })
			if err != nil && !errors.Is(err, jetstream.ErrObjectNotFound) {
				errs = append(errs, fmt.Errorf("delete blob %s: %w", info.Name, err))
			}
		}
	}
	return errors.Join(errs...)
}

// Keys returns the keys under prefix, sorted (for inspection and tests).
func (b *Blobs) Keys(ctx context.Context, prefix string) ([]string, error) {
	list, err := b.list(ctx)
	if errors.Is(err, jetstream.ErrNoObjectsFound) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("list blobs: %w", err)
	}
	var out []string
	for _, info := range list {
		if prefix == "" || info.Name == prefix || strings.HasPrefix(info.Name, prefix+"/") {
			out = append(out, info.Name)
		}
	}
	sort.Strings(out)
	return out, nil
}

func (b *Blobs) list(ctx context.Context) ([]*jetstream.ObjectInfo, error) {
	var list []*jetstream.ObjectInfo
	err := retry(ctx, func(ctx context.Context) error {
		var err error
		list, err = b.obj.List(ctx)
		return err
	})
	return list, err
}

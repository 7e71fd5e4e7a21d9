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

// Put implements jobs.Blobs.
func (b *Blobs) Put(ctx context.Context, key string, r io.Reader) error {
	if !jobs.ValidKey(key) {
		return fmt.Errorf("blob key %q: not a list of names from [A-Za-z0-9._-] separated by /", key)
	}
	info, err := b.obj.GetInfo(ctx, key)
	switch {
	case errors.Is(err, jetstream.ErrObjectNotFound):
		info = nil
	case err != nil:
		return fmt.Errorf("blob %s: %w", key, err)
	}
	if info != nil && writeOnce(key) {
		// Drain r so a caller streaming into it is not blocked.
		_, _ = io.Copy(io.Discard, r)
		return nil
	}
	if info == nil {
		if _, err := b.obj.Put(ctx, jetstream.ObjectMeta{Name: key}, r); err != nil {
			return fmt.Errorf("blob %s: %w", key, err)
		}
		return nil
	}
	data, err := io.ReadAll(r)
	if err != nil {
		return fmt.Errorf("blob %s: %w", key, err)
	}
	sum := sha256.Sum256(data)
	if info.Digest == digest(sum[:]) {
		return nil
	}
	if _, err := b.obj.Put(ctx, jetstream.ObjectMeta{Name: key}, bytes.NewReader(data)); err != nil {
		return fmt.Errorf("blob %s: %w", key, err)
	}
	return nil
}

// Get implements jobs.Blobs. The reader checks the content hash at the
// end and fails with an error if the contents were corrupted.
func (b *Blobs) Get(ctx context.Context, key string) (io.ReadCloser, error) {
	if !jobs.ValidKey(key) {
		return nil, fmt.Errorf("blob key %q: not a list of names from [A-Za-z0-9._-] separated by /", key)
	}
	res, err := b.obj.Get(ctx, key)
	if errors.Is(err, jetstream.ErrObjectNotFound) {
		return nil, fmt.Errorf("blob %s: %w", key, jobs.ErrNotFound)
	}
	if err != nil {
		return nil, fmt.Errorf("blob %s: %w", key, err)
	}
	return res, nil
}

// Delete implements jobs.Blobs. It lists the store to find the keys under
// prefix, so its cost grows with the number of objects.
func (b *Blobs) Delete(ctx context.Context, prefix string) error {
	if !jobs.ValidKey(prefix) {
		return fmt.Errorf("blob key %q: not a list of names from [A-Za-z0-9._-] separated by /", prefix)
	}
	list, err := b.obj.List(ctx)
	if errors.Is(err, jetstream.ErrNoObjectsFound) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("delete blobs %s: %w", prefix, err)
	}
	var errs []error
	for _, info := range list {
		if info.Name == prefix || strings.HasPrefix(info.Name, prefix+"/") {
			if err := b.obj.Delete(ctx, info.Name); err != nil && !errors.Is(err, jetstream.ErrObjectNotFound) {
				errs = append(errs, fmt.Errorf("delete blob %s: %w", info.Name, err))
			}
		}
	}
	return errors.Join(errs...)
}

// Keys returns the keys under prefix, sorted (for inspection and tests).
func (b *Blobs) Keys(ctx context.Context, prefix string) ([]string, error) {
	list, err := b.obj.List(ctx)
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

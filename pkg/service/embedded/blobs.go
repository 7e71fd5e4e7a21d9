package embedded

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strings"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// Blobs is a jobs.Blobs on a directory: one file per key. Keys are checked
// with jobs.ValidKey, so no key can name a file outside the directory.
type Blobs struct {
	root   string
	noSync bool
}

// OpenBlobs uses dir (created if needed) for blobs and removes temporary
// files left by an interrupted Put.
func OpenBlobs(dir string) (*Blobs, error) {
	if err := os.MkdirAll(dir, 0o750); err != nil {
		return nil, fmt.Errorf("blob directory %s: %w", dir, err)
	}
	_ = filepath.WalkDir(dir, func(path string, d fs.DirEntry, err error) error {
		if err == nil && !d.IsDir() && strings.HasPrefix(d.Name(), ".tmp-") {
			os.Remove(path)
		}
		return nil
	})
	return &Blobs{root: dir}, nil
}

func (b *Blobs) path(key string) (string, error) {
	if !jobs.ValidKey(key) {
		return "", fmt.Errorf("blob key %q: not a list of names from [A-Za-z0-9._-] separated by /", key)
	}
	return filepath.Join(b.root, filepath.FromSlash(key)), nil
}

// Put implements jobs.Blobs: it writes to a temporary file in the same
// directory, syncs it and renames it over the key's file.
func (b *Blobs) Put(ctx context.Context, key string, r io.Reader) error {
	return b.write(ctx, key, r, os.Rename)
}

// Create implements jobs.Blobs: as Put, but the temporary file is linked
// to the key's name, which fails when that name exists (a rename would
// replace it), and then removed.
func (b *Blobs) Create(ctx context.Context, key string, r io.Reader) error {
	return b.write(ctx, key, r, func(tmp, p string) error {
		err := os.Link(tmp, p)
		if errors.Is(err, fs.ErrExist) {
			err = jobs.ErrExists
		}
		if err == nil {
			err = os.Remove(tmp)
		}
		return err
	})
}

// write writes the contents of r to a temporary file in the key's
// directory, syncs it, and gives it the key's name with place(tmp, path).
func (b *Blobs) write(ctx context.Context, key string, r io.Reader, place func(tmp, p string) error) error {
	p, err := b.path(key)
	if err != nil {
		return err
	}
	dir := filepath.Dir(p)
	if err := os.MkdirAll(dir, 0o750); err != nil {
		return fmt.Errorf("blob %s: %w", key, err)
	}
	f, err := os.CreateTemp(dir, ".tmp-*")
	if err != nil {
		return fmt.Errorf("blob %s: %w", key, err)
	}
	tmp := f.Name()
	_, err = io.Copy(f, ctxReader{ctx, r})
	if err == nil && !b.noSync {
		err = f.Sync()
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = place(tmp, p)
	}
	if err != nil {
		os.Remove(tmp)
		return fmt.Errorf("blob %s: %w", key, err)
	}
	if d, err := os.Open(dir); err == nil && !b.noSync {
		d.Sync()
		d.Close()
	}
	return nil
}

// Get implements jobs.Blobs.
func (b *Blobs) Get(ctx context.Context, key string) (io.ReadCloser, error) {
	p, err := b.path(key)
	if err != nil {
		return nil, err
	}
	f, err := os.Open(p)
	if errors.Is(err, fs.ErrNotExist) {
		return nil, fmt.Errorf("blob %s: %w", key, jobs.ErrNotFound)
	}
	if err != nil {
		return nil, fmt.Errorf("blob %s: %w", key, err)
	}
	return f, nil
}

// Delete implements jobs.Blobs.
func (b *Blobs) Delete(ctx context.Context, prefix string) error {
	p, err := b.path(prefix)
	if err != nil {
		return err
	}
	if err := os.RemoveAll(p); err != nil {
		return fmt.Errorf("delete blobs %s: %w", prefix, err)
	}
	return nil
}

// ctxReader stops a copy when its context ends.
type ctxReader struct {
	ctx context.Context
	r   io.Reader
}

func (c ctxReader) Read(p []byte) (int, error) {
	if err := c.ctx.Err(); err != nil {
		return 0, err
	}
	return c.r.Read(p)
}

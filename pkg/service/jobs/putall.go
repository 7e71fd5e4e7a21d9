package jobs

import (
	"bytes"
	"context"
	"slices"
	"sync"
)

// maxPuts bounds the Puts PutAll runs at once.
const maxPuts = 8

// PutAll stores each file under the blob key key(name) of its name,
// several at the same time: the waits of the blob store (a file's and its
// directory's fsync, a network round trip) overlap instead of adding up.
// It waits for every Put; the error is that of the first failing file in
// the order of the names, whatever the timing. Files stored before a
// failure are left for the caller to delete.
func PutAll(ctx context.Context, b Blobs, files map[string][]byte, key func(name string) string) error {
	names := make([]string, 0, len(files))
	for name := range files {
		names = append(names, name)
	}
	slices.Sort(names)
	errs := make([]error, len(names))
	sem := make(chan struct{}, maxPuts)
	var wg sync.WaitGroup
	for i, name := range names {
		sem <- struct{}{}
		wg.Go(func() {
			defer func() { <-sem }()
			errs[i] = b.Put(ctx, key(name), bytes.NewReader(files[name]))
		})
	}
	wg.Wait()
	for _, err := range errs {
		if err != nil {
			return err
		}
	}
	return nil
}

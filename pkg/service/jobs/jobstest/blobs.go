package jobstest

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"strings"
	"sync"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// CheckCreate checks the contract of jobs.Blobs.Create on b: a key that
// holds nothing is created and reads back; a key that holds contents,
// written by Put or by Create, is refused with jobs.ErrExists and keeps
// them; a key deleted is created again; of several Creates of one key at
// once exactly one succeeds, and the key holds its contents; Put still
// replaces what Create stored; an invalid key is an error. The keys are
// under series id's prefix, which it deletes at the end. It returns a
// description of the first difference, or "".
func CheckCreate(ctx context.Context, b jobs.Blobs, id string) (string, error) {
	key := func(name string) string { return jobs.SeriesKey(id, name) }
	read := func(k string) (string, error) {
		rc, err := b.Get(ctx, k)
		if err != nil {
			return "", err
		}
		defer rc.Close()
		data, err := io.ReadAll(rc)
		return string(data), err
	}
	defer b.Delete(ctx, jobs.SeriesKey(id, ""))
	big := strings.Repeat("solution ", 200000) // more than one chunk of the object store
	a := key("solved/000001.bin")
	if err := b.Create(ctx, a, strings.NewReader(big)); err != nil {
		return "", fmt.Errorf("create: %w", err)
	}
	if got, err := read(a); err != nil || got != big {
		return fmt.Sprintf("created blob read back: %d bytes, %v; want %d bytes", len(got), err, len(big)), nil
	}
	for _, again := range []string{big, "another"} {
		if err := b.Create(ctx, a, strings.NewReader(again)); !errors.Is(err, jobs.ErrExists) {
			return fmt.Sprintf("create of a key created before (%d bytes): %v, want ErrExists", len(again), err), nil
		}
	}
	if got, err := read(a); err != nil || got != big {
		return fmt.Sprintf("after refused creates: %d bytes, %v; want the first contents", len(got), err), nil
	}
	p := key("solved/000002.bin")
	if err := b.Put(ctx, p, strings.NewReader("put")); err != nil {
		return "", fmt.Errorf("put: %w", err)
	}
	if err := b.Create(ctx, p, strings.NewReader("created")); !errors.Is(err, jobs.ErrExists) {
		return fmt.Sprintf("create of a key Put before: %v, want ErrExists", err), nil
	}
	if err := jobs.DeleteKey(ctx, b, p); err != nil {
		return "", fmt.Errorf("delete: %w", err)
	}
	if err := b.Create(ctx, p, strings.NewReader("created")); err != nil {
		return fmt.Sprintf("create of a key deleted: %v", err), nil
	}
	if got, err := read(p); err != nil || got != "created" {
		return fmt.Sprintf("created after delete: %q, %v", got, err), nil
	}
	if err := b.Put(ctx, p, strings.NewReader("replaced")); err != nil {
		return "", fmt.Errorf("put over created: %w", err)
	}
	if got, err := read(p); err != nil || got != "replaced" {
		return fmt.Sprintf("Put over a created key: %q, %v; want it replaced", got, err), nil
	}

	// Creates at once: one wins, whatever the order.
	const n = 6
	c := key("solved/000003.bin")
	var wg sync.WaitGroup
	errs := make([]error, n)
	for i := range n {
		wg.Go(func() {
			errs[i] = b.Create(ctx, c, bytes.NewReader([]byte(fmt.Sprintf("attempt %d", i))))
		})
	}
	wg.Wait()
	won := -1
	for i, err := range errs {
		switch {
		case err == nil && won >= 0:
			return fmt.Sprintf("Creates at once: attempts %d and %d both succeeded", won, i), nil
		case err == nil:
			won = i
		case !errors.Is(err, jobs.ErrExists):
			return "", fmt.Errorf("create at once, attempt %d: %w", i, err)
		}
	}
	if won < 0 {
		return "Creates at once: none succeeded", nil
	}
	if got, err := read(c); err != nil || got != fmt.Sprintf("attempt %d", won) {
		return fmt.Sprintf("Creates at once: the key holds %q (%v), attempt %d succeeded", got, err, won), nil
	}
	if err := b.Create(ctx, "../x", strings.NewReader("x")); err == nil || errors.Is(err, jobs.ErrExists) {
		return fmt.Sprintf("create with key ../x: %v, want an invalid key", err), nil
	}
	return "", nil
}

package jobs

import (
	"context"
	"io"
	"testing"
)

// callLog is a Blobs that records the deletions asked of it.
type callLog struct{ calls []string }

func (c *callLog) Put(context.Context, string, io.Reader) error    { return nil }
func (c *callLog) Create(context.Context, string, io.Reader) error { return nil }
func (c *callLog) Get(context.Context, string) (io.ReadCloser, error) {
	return nil, ErrNotFound
}
func (c *callLog) Delete(_ context.Context, prefix string) error {
	c.calls = append(c.calls, "Delete "+prefix)
	return nil
}

// keyLog is a callLog with a DeleteKey of its own.
type keyLog struct{ callLog }

func (k *keyLog) DeleteKey(_ context.Context, key string) error {
	k.calls = append(k.calls, "DeleteKey "+key)
	return nil
}

func TestDeleteKey(t *testing.T) {
	const key = "series/s/state/000001.json"
	plain, keyed := &callLog{}, &keyLog{}
	for _, c := range []struct {
		b    Blobs
		log  *callLog
		want string
	}{
		{plain, plain, "Delete " + key},
		{keyed, &keyed.callLog, "DeleteKey " + key},
	} {
		if err := DeleteKey(context.Background(), c.b, key); err != nil {
			t.Fatal(err)
		}
		if len(c.log.calls) != 1 || c.log.calls[0] != c.want {
			t.Errorf("%T: calls %q, want [%q]", c.b, c.log.calls, c.want)
		}
	}
}

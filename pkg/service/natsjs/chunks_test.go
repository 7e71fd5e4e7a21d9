package natsjs

import (
	"bytes"
	"context"
	"math/rand/v2"
	"testing"

	"github.com/nats-io/nats.go/jetstream"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// TestBlobsChunks reads objects of every chunk layout back whole: written
// by Put (chunks of up to maxChunk) and read by Get and by the nats.go
// object store reader (what any other client, or an earlier version of
// this package, reads with), and written by the object store's own Put
// with its default 128 KiB chunks (objects of earlier versions) and read
// by Get. The contents are random bytes, so the base64 of the answers
// holds every character of its alphabet.
func TestBlobsChunks(t *testing.T) {
	b := open(t, runServer(t), nil)
	bl := b.Blobs()
	ctx := testCtx(t)
	rng := rand.New(rand.NewPCG(3, 5))
	for _, size := range []int{0, 1, 2, 3, 128<<10 - 1, 128 << 10, maxChunk, maxChunk + 1, 3*maxChunk - 7} {
		data := make([]byte, size)
		for i := range data {
			data[i] = byte(rng.Uint32())
		}
		key := jobs.InputKey(jobs.NewID(), "reference")
		if err := bl.Put(ctx, key, bytes.NewReader(data)); err != nil {
			t.Fatalf("%d bytes: Put: %v", size, err)
		}
		info, err := b.blobs.obj.GetInfo(ctx, key)
		if err != nil {
			t.Fatalf("%d bytes: %v", size, err)
		}
		if want := uint32((size + maxChunk - 1) / maxChunk); info.Chunks != want {
			t.Errorf("%d bytes: %d chunks, want %d", size, info.Chunks, want)
		}
		if got := readAll(t, bl, key); !bytes.Equal(got, data) {
			t.Errorf("%d bytes: Get read back %d bytes, not the same", size, len(got))
		}
		if got, err := b.blobs.obj.GetBytes(ctx, key); err != nil || !bytes.Equal(got, data) {
			t.Errorf("%d bytes: the object store's reader: %v, %d bytes", size, err, len(got))
		}
		old := jobs.InputKey(jobs.NewID(), "reference")
		if _, err := b.blobs.obj.Put(ctx, jetstream.ObjectMeta{Name: old}, bytes.NewReader(data)); err != nil {
			t.Fatalf("%d bytes: object store Put: %v", size, err)
		}
		if got := readAll(t, bl, old); !bytes.Equal(got, data) {
			t.Errorf("%d bytes in 128 KiB chunks: Get read back %d bytes, not the same", size, len(got))
		}
	}
}

func readAll(t *testing.T, bl *Blobs, key string) []byte {
	t.Helper()
	rc, err := bl.Get(context.Background(), key)
	if err != nil {
		t.Fatalf("Get %s: %v", key, err)
	}
	defer rc.Close()
	var buf bytes.Buffer
	if _, err := buf.ReadFrom(rc); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// TestChunkSize checks the chunk size for servers with different
// largest messages: a chunk read back as base64 in a JSON answer still
// fits in one.
func TestChunkSize(t *testing.T) {
	for _, c := range []struct {
		payload int64
		want    uint32
	}{
		{1 << 20, maxChunk},          // the server's default
		{8 << 20, maxChunk},          // larger: still maxChunk
		{512 << 10, 384<<10 - 4<<10}, // smaller: 3/4 of it, less room for the JSON
		{1 << 10, 32 << 10},          // absurdly small: the floor
	} {
		got := chunkSize(c.payload)
		if got != c.want {
			t.Errorf("chunkSize(%d) = %d, want %d", c.payload, got, c.want)
		}
		if c.payload >= 64<<10 && (int64(got)+2)/3*4+4<<10 > c.payload {
			t.Errorf("chunkSize(%d) = %d: its base64 does not fit", c.payload, got)
		}
	}
}

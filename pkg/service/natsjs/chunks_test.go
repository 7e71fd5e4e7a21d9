package natsjs

import (
	"bytes"
	"compress/flate"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math/rand/v2"
	"strings"
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
		if got := getMsgRead(t, b, info); !bytes.Equal(got, data) {
			t.Errorf("%d bytes: the read of earlier versions: %d bytes, not the same", size, len(got))
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

// getMsgRead reads the object described by info as earlier versions of
// Blobs.Get did: a jetstream.Stream.GetMsg per chunk, answers decoded by
// nats.go.
func getMsgRead(t *testing.T, b *Backend, info *jetstream.ObjectInfo) []byte {
	t.Helper()
	ctx := testCtx(t)
	st, err := b.js.Stream(ctx, b.blobs.stream)
	if err != nil {
		t.Fatal(err)
	}
	subject := "$O." + b.blobs.bucket + ".C." + info.NUID
	var got []byte
	seq := uint64(1)
	for range info.Chunks {
		m, err := st.GetMsg(ctx, seq, jetstream.WithGetMsgSubject(subject))
		if err != nil {
			t.Fatalf("chunk after %d: %v", seq-1, err)
		}
		got = append(got, m.Data...)
		seq = m.Sequence + 1
	}
	return got
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

// fieldJSON returns JSON shaped as a frame's results: n points of a
// smooth displacement field with measurement noise, as encoding/json
// writes float64s (invented data, for the deflate checks).
func fieldJSON(n int) []byte {
	rng := rand.New(rand.NewPCG(7, 11))
	type point struct {
		X, Y       float64
		U, V       float64
		Exx, Eyy   float64
		ZNCC       float64
		OK         bool
		Iterations int
	}
	pts := make([]point, n)
	for i := range pts {
		x, y := float64(i%60*8+20), float64(i/60*8+20)
		pts[i] = point{x, y, 0.02*x + 1e-3*rng.NormFloat64(), -0.006*y + 1e-3*rng.NormFloat64(),
			0.02 + 1e-4*rng.NormFloat64(), -0.006 + 1e-4*rng.NormFloat64(), 0.99 + 1e-3*rng.Float64(), true, 3 + rng.IntN(4)}
	}
	b, _ := json.Marshal(map[string]any{"points": pts})
	return b
}

// TestBlobsDeflate checks Options.Compress: a large compressible blob is
// stored deflated, with its encoding, size and digest in the metadata,
// and read back as written, also by a backend without the option; small
// or incompressible blobs are stored as they are; a second Put of the
// same contents writes nothing, and a result is kept once; an object
// whose inflated contents differ from its metadata is an error.
func TestBlobsDeflate(t *testing.T) {
	url := runServer(t)
	z := open(t, url, func(o *Options) { o.Compress = true })
	plain := open(t, url, nil)
	ctx := testCtx(t)
	rng := rand.New(rand.NewPCG(1, 2))
	noise := make([]byte, 200<<10)
	for i := range noise {
		noise[i] = byte(rng.Uint32())
	}
	field := fieldJSON(3600)
	for _, c := range []struct {
		name     string
		data     []byte
		deflated bool
	}{
		{"field JSON", field, true},
		{"small JSON", field[:compressMin-1], false},
		{"incompressible", noise, false},
	} {
		key := jobs.ResultKey(jobs.NewID(), "field.json")
		if err := z.Blobs().Put(ctx, key, bytes.NewReader(c.data)); err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		info, err := z.blobs.obj.GetInfo(ctx, key)
		if err != nil {
			t.Fatal(err)
		}
		if got := info.Metadata[metaEncoding] == encDeflate; got != c.deflated {
			t.Errorf("%s: deflated = %v, want %v (%d bytes stored of %d)", c.name, got, c.deflated, info.Size, len(c.data))
		}
		if c.deflated && info.Size > uint64(len(c.data))*4/5 {
			t.Errorf("%s: %d bytes stored of %d", c.name, info.Size, len(c.data))
		}
		for _, be := range []*Backend{z, plain} {
			if got := readAll(t, be.Blobs(), key); !bytes.Equal(got, c.data) {
				t.Errorf("%s: read back %d bytes, not the %d written", c.name, len(got), len(c.data))
			}
		}
		// A result is kept once, and a Put of the same contents again
		// rewrites nothing.
		if err := z.Blobs().Put(ctx, key, bytes.NewReader(c.data)); err != nil {
			t.Fatal(err)
		}
		if again, _ := z.blobs.obj.GetInfo(ctx, key); again.NUID != info.NUID {
			t.Errorf("%s: a second Put of the same result rewrote it", c.name)
		}
	}
	in := jobs.InputKey(jobs.NewID(), "state")
	if err := z.Blobs().Put(ctx, in, bytes.NewReader(field)); err != nil {
		t.Fatal(err)
	}
	info1, _ := z.blobs.obj.GetInfo(ctx, in)
	if err := z.Blobs().Put(ctx, in, bytes.NewReader(field)); err != nil {
		t.Fatal(err)
	}
	if info2, _ := z.blobs.obj.GetInfo(ctx, in); info2.NUID != info1.NUID {
		t.Error("a Put of identical contents rewrote the deflated object")
	}
	// Metadata that does not match the inflated contents.
	bad := jobs.InputKey(jobs.NewID(), "state")
	meta := jetstream.ObjectMeta{Name: bad, Metadata: map[string]string{metaEncoding: encDeflate,
		metaSize: fmt.Sprint(len(field)), metaDigest: info1.Metadata[metaDigest][:20] + "x"}}
	if _, err := z.blobs.obj.Put(ctx, meta, bytes.NewReader(deflate(field))); err != nil {
		t.Fatal(err)
	}
	if _, err := z.Blobs().Get(ctx, bad); err == nil {
		t.Error("Get of a deflated object whose digest does not match: no error")
	}
	meta.Name, meta.Metadata = jobs.InputKey(jobs.NewID(), "state"), map[string]string{metaEncoding: "zstd"}
	if _, err := z.blobs.obj.Put(ctx, meta, bytes.NewReader(field)); err != nil {
		t.Fatal(err)
	}
	if _, err := z.Blobs().Get(ctx, meta.Name); err == nil || !strings.Contains(err.Error(), "zstd") {
		t.Errorf("Get of an object of an unknown encoding: %v", err)
	}
}

// BenchmarkDeflate deflates and inflates frame-result-shaped JSON
// (fieldJSON, 3 600 points) at the level Put uses (BestSpeed) and at
// flate.HuffmanOnly, in the same run; it reports the stored fraction. Run with
//
//	go test -run '^$' -bench Deflate ./pkg/service/natsjs
func BenchmarkDeflate(b *testing.B) {
	data := fieldJSON(3600)
	for _, c := range []struct {
		name  string
		level int
	}{{"BestSpeed", flate.BestSpeed}, {"HuffmanOnly", flate.HuffmanOnly}} {
		var z []byte
		b.Run("deflate/"+c.name, func(b *testing.B) {
			b.SetBytes(int64(len(data)))
			for range b.N {
				var buf bytes.Buffer
				w, _ := flate.NewWriter(&buf, c.level)
				w.Write(data)
				w.Close()
				z = buf.Bytes()
			}
			b.ReportMetric(float64(len(z))/float64(len(data)), "stored/written")
		})
		b.Run("inflate/"+c.name, func(b *testing.B) {
			b.SetBytes(int64(len(data)))
			for range b.N {
				var out bytes.Buffer
				if _, err := out.ReadFrom(flate.NewReader(bytes.NewReader(z))); err != nil || out.Len() != len(data) {
					b.Fatal(err)
				}
			}
		})
	}
}

// TestBlobsReadCache checks that Get returns contents this process wrote
// or read without reading the chunks again while the object is the same
// (its NUID and digest), and reads the chunks of an object replaced or
// deleted and written again by another process; results are never kept;
// the cache stays within its bound, dropping the entry used least lately.
func TestBlobsReadCache(t *testing.T) {
	url := runServer(t)
	a, other := open(t, url, nil), open(t, url, nil)
	ctx := testCtx(t)
	data := fieldJSON(900)
	key := jobs.SeriesKey(jobs.NewID(), "state/000001.json")
	reads := func(want int64, what string) {
		t.Helper()
		if got := a.blobs.chunkReads.Swap(0); got != want {
			t.Errorf("%s: %d chunks read, want %d", what, got, want)
		}
	}
	if err := a.Blobs().Put(ctx, key, bytes.NewReader(data)); err != nil {
		t.Fatal(err)
	}
	a.blobs.chunkReads.Store(0)
	if got := readAll(t, a.Blobs(), key); !bytes.Equal(got, data) {
		t.Fatal("read back differs")
	}
	reads(0, "Get after Put")
	// Replaced by another process: read again, then kept.
	data2 := fieldJSON(901)
	if err := other.Blobs().Put(ctx, key, bytes.NewReader(data2)); err != nil {
		t.Fatal(err)
	}
	if got := readAll(t, a.Blobs(), key); !bytes.Equal(got, data2) {
		t.Fatal("Get after another process replaced the object: old contents")
	}
	reads(1, "Get after a replacement")
	readAll(t, a.Blobs(), key)
	reads(0, "second Get")
	// Deleted and written again with the same contents (a new object).
	if err := other.Blobs().DeleteKey(ctx, key); err != nil {
		t.Fatal(err)
	}
	if _, err := a.Blobs().Get(ctx, key); !errors.Is(err, jobs.ErrNotFound) {
		t.Fatalf("Get of a deleted object: %v", err)
	}
	if err := other.Blobs().Put(ctx, key, bytes.NewReader(data2)); err != nil {
		t.Fatal(err)
	}
	if got := readAll(t, a.Blobs(), key); !bytes.Equal(got, data2) {
		t.Fatal("Get after delete and Put: differs")
	}
	reads(1, "Get of the object written again")
	// Results are not kept.
	res := jobs.ResultKey(jobs.NewID(), "field.json")
	if err := a.Blobs().Put(ctx, res, bytes.NewReader(data)); err != nil {
		t.Fatal(err)
	}
	readAll(t, a.Blobs(), res)
	readAll(t, a.Blobs(), res)
	reads(2, "two Gets of a result")

	c := newReadCache(100)
	c.put("a", "n1", "d1", make([]byte, 25))
	c.put("b", "n2", "d2", make([]byte, 25))
	c.put("c", "n3", "d3", make([]byte, 25))
	c.get("a", "n1", "d1")
	c.put("d", "n4", "d4", make([]byte, 25))
	c.put("e", "n5", "d5", make([]byte, 25)) // over the bound: drops b, used least lately
	if c.size > 100 || c.get("b", "n2", "d2") != nil || c.get("a", "n1", "d1") == nil || c.get("e", "n5", "d5") == nil {
		t.Errorf("after eviction: size %d, keys %v", c.size, c.items)
	}
	if c.get("a", "n1", "other digest") != nil || c.get("a", "other nuid", "d1") != nil {
		t.Error("an entry returned for another object")
	}
	c.put("big", "n6", "d6", make([]byte, 26))
	if c.get("big", "n6", "d6") != nil {
		t.Error("contents beyond a quarter of the bound kept")
	}
}

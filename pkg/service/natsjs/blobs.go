package natsjs

import (
	"bytes"
	"compress/flate"
	"context"
	"crypto/sha256"
	"encoding/base64"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"slices"
	"sort"
	"strconv"
	"strings"
	"sync/atomic"

	"github.com/nats-io/nats.go"
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
	obj    jetstream.ObjectStore
	js     jetstream.JetStream
	st     jetstream.Stream // the store's stream (Create's reads, writes and purges)
	nc     *nats.Conn
	stream string // the store's stream, read from its leader (direct reads off)
	bucket string
	chunk  uint32 // the chunk size of objects written (chunkSize)
	// compress has Put deflate large blobs (Options.Compress).
	compress bool
	cache    *readCache
	// chunkReads counts the chunks read (for tests).
	chunkReads atomic.Int64
}

// Deflated objects (Options.Compress). The object store's metadata of
// such an object holds its encoding and the size and SHA-256 digest of
// the contents as written; its own size and digest are those of the
// deflated bytes (RFC 1951, compress/flate) it stores.
const (
	metaEncoding = "mottle-encoding"
	metaSize     = "mottle-size"
	metaDigest   = "mottle-digest"
	encDeflate   = "deflate"
	// compressMin is the smallest blob Put deflates: below it the bytes
	// saved are too few to pay for the work.
	compressMin = 64 << 10
	// compressLevel is flate.BestSpeed: on the JSON of results it stores
	// about a third of the bytes, against three fifths by entropy coding
	// alone (flate.HuffmanOnly), for about the same CPU (BenchmarkDeflate).
	compressLevel = flate.BestSpeed
)

// deflate returns data deflated, or nil when that does not save at least
// a fifth of its bytes.
func deflate(data []byte) []byte {
	var buf bytes.Buffer
	buf.Grow(len(data) / 2)
	w, err := flate.NewWriter(&buf, compressLevel)
	if err != nil {
		return nil
	}
	if _, err := w.Write(data); err != nil || w.Close() != nil {
		return nil
	}
	if buf.Len() > len(data)*4/5 {
		return nil
	}
	return buf.Bytes()
}

// contentDigest returns the digest of the contents as written of the
// object described by info.
func contentDigest(info *jetstream.ObjectInfo) string {
	if info.Metadata[metaEncoding] != "" {
		return info.Metadata[metaDigest]
	}
	return info.Digest
}

// decode returns the contents as written of an object described by info
// whose stored bytes are data, checked against the size and digest its
// metadata gives them.
func decode(info *jetstream.ObjectInfo, data []byte) ([]byte, error) {
	enc := info.Metadata[metaEncoding]
	switch enc {
	case "":
		return data, nil
	case encDeflate:
	default:
		return nil, fmt.Errorf("object encoding %q: this version reads deflate only", enc)
	}
	size, err := strconv.ParseInt(info.Metadata[metaSize], 10, 64)
	if err != nil || size < 0 {
		return nil, fmt.Errorf("deflated object: size %q in its metadata: %w", info.Metadata[metaSize], jetstream.ErrBadObjectMeta)
	}
	out := bytes.NewBuffer(make([]byte, 0, size))
	r := flate.NewReader(bytes.NewReader(data))
	if _, err := io.Copy(out, io.LimitReader(r, size+1)); err != nil {
		return nil, fmt.Errorf("inflate: %w", err)
	}
	sum := sha256.Sum256(out.Bytes())
	if int64(out.Len()) != size || digest(sum[:]) != info.Metadata[metaDigest] {
		return nil, fmt.Errorf("inflated %d bytes, digest %s; metadata says %d bytes, digest %s",
			out.Len(), digest(sum[:]), size, info.Metadata[metaDigest])
	}
	return out.Bytes(), nil
}

// maxChunk bounds the chunk size of objects written: four times the
// object store's default of 128 KiB, so that an object of a frame's
// results or state (0.3–1.1 MB) is three chunks or fewer, each one
// message stored, replicated and read back, instead of nine. Readers
// take the chunk count and sizes from the object's metadata, so objects
// of any chunk size, written before or by other versions, read alike.
const maxChunk = 512 << 10

// chunkSize is the chunk size for a server whose largest message is
// maxPayload bytes: maxChunk, or less, so that a chunk read back (in
// base64, 4/3 of its size, within a JSON answer) fits in a message too.
func chunkSize(maxPayload int64) uint32 {
	c := maxPayload*3/4 - 4<<10
	return uint32(max(min(c, maxChunk), 32<<10))
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
//
// An object found already written is kept only if it reads back whole:
// every chunk present, with the size and digest its metadata names. A
// write publishes the metadata before every chunk's acknowledgement has
// come back; when one then fails (a node stopped), it purges the chunks
// and reports the error, but the metadata may have been stored. Such an
// object is written again, under a result key too.
//
// The object is written as the object store's Put writes it (chunks, then
// the metadata, which replaces the old object's, then the old chunks
// purged), by write: one read of the metadata per Put instead of two, and
// no subscription for the acknowledgements per Put (the object store's Put
// makes a JetStream context of its own each time, whose reply
// subscription every node of a cluster learns of and forgets).
func (b *Blobs) Put(ctx context.Context, key string, r io.Reader) error {
	return b.put(ctx, key, r, false)
}

// Create implements jobs.Blobs. It writes the object as Put does, its
// chunks and then its metadata, but the metadata is published on the
// condition that the last message of its subject is the one Create read
// (none, or the metadata of a deleted object): the stream's leader
// refuses it when another write came in between, and of Creates at once
// the first to reach the leader is stored. The chunks of a Create refused
// are purged. An object found whose chunks are not all there (see Put)
// holds no contents, and Create writes over it.
//
// It costs what Put costs: one read of the metadata, the chunks and the
// metadata written.
func (b *Blobs) Create(ctx context.Context, key string, r io.Reader) error {
	return b.put(ctx, key, r, true)
}

// put is Put, or Create when create is set.
func (b *Blobs) put(ctx context.Context, key string, r io.Reader, create bool) error {
	if !jobs.ValidKey(key) {
		return fmt.Errorf("blob key %q: not a list of names from [A-Za-z0-9._-] separated by /", key)
	}
	data, err := io.ReadAll(r)
	if err != nil {
		return fmt.Errorf("blob %s: %w", key, err)
	}
	sum := sha256.Sum256(data)
	stored, extra := data, map[string]string(nil)
	if b.compress && len(data) >= compressMin {
		if z := deflate(data); z != nil {
			stored, extra = z, map[string]string{metaEncoding: encDeflate, metaSize: strconv.Itoa(len(data)), metaDigest: digest(sum[:])}
		}
	}
	metaSubj := "$O." + b.bucket + ".M." + base64.URLEncoding.EncodeToString([]byte(key))
	var mine []string // the objects this call wrote: an answer lost on the way is no refusal
	err = retry(ctx, func(ctx context.Context) error {
		old, last, err := b.lastInfo(ctx, metaSubj)
		if err != nil {
			return err
		}
		if old != nil && !old.Deleted {
			keep := writeOnce(key) || contentDigest(old) == digest(sum[:])
			if create {
				keep = true
			}
			if ours := slices.Contains(mine, old.NUID); keep || ours {
				// Written before: keep the first answer, if it is whole.
				_, err := b.readChunks(ctx, old)
				switch {
				case err == nil && (ours || !create):
					if ours && !writeOnce(key) {
						b.cache.put(key, old.NUID, old.Digest, data)
					}
					return nil
				case err == nil:
					return jobs.ErrExists
				case !errors.Is(err, errChanged):
					return err
				}
				// Metadata without all its chunks (see Put's doc
				// comment) is no answer: write the object again.
			}
		}
		cond := (*uint64)(nil)
		if create {
			cond = &last
		}
		info, err := b.write(ctx, key, metaSubj, stored, extra, cond, &mine)
		if err != nil {
			return err
		}
		if old != nil && !old.Deleted && !create {
			// The old object's chunks, as the object store's Put purges them.
			_ = b.st.Purge(ctx, jetstream.WithPurgeSubject("$O."+b.bucket+".C."+old.NUID))
		}
		if !writeOnce(key) {
			b.cache.put(key, info.NUID, info.Digest, data)
		}
		return nil
	})
	if err != nil {
		b.cache.drop(key)
		return fmt.Errorf("blob %s: %w", key, err)
	}
	return nil
}

// lastInfo reads the last message of an object's metadata subject: the
// object (deleted or not) and the message's sequence, or nil and 0 when
// there is none.
func (b *Blobs) lastInfo(ctx context.Context, metaSubj string) (*jetstream.ObjectInfo, uint64, error) {
	m, err := b.st.GetLastMsgForSubject(ctx, metaSubj)
	if errors.Is(err, jetstream.ErrMsgNotFound) {
		return nil, 0, nil
	}
	if err != nil {
		return nil, 0, err
	}
	var info jetstream.ObjectInfo
	if err := json.Unmarshal(m.Data, &info); err != nil {
		return nil, 0, fmt.Errorf("%w: %v", jetstream.ErrBadObjectMeta, err)
	}
	return &info, m.Sequence, nil
}

// errRaced reports a conditional write of an object's metadata refused
// because another write came first: Create reads the metadata again.
var errRaced = errors.New("another write of the object came first")

// write stores an object under key whose metadata subject is metaSubj:
// its chunks of stored, then its metadata, which replaces the metadata
// before it (a roll-up of the subject); when last is not nil, only on the
// condition that the last message on metaSubj is sequence *last (0:
// none), else it fails with errRaced. The object's id is appended to
// *mine before anything is sent. It waits for every acknowledgement; when
// one fails it purges the object's chunks.
func (b *Blobs) write(ctx context.Context, key, metaSubj string, stored []byte, extra map[string]string, last *uint64, mine *[]string) (*jetstream.ObjectInfo, error) {
	id := jobs.NewID() // any name of a subject token: the object store's own is a NUID
	*mine = append(*mine, id)
	chunkSubj := "$O." + b.bucket + ".C." + id
	info := &jetstream.ObjectInfo{Bucket: b.bucket, NUID: id,
		ObjectMeta: jetstream.ObjectMeta{Name: key, Metadata: extra, Opts: &jetstream.ObjectMetaOptions{ChunkSize: b.chunk}}}
	h := sha256.New()
	var acks []jetstream.PubAckFuture // those not yet answered
	fail := func(err error) (*jetstream.ObjectInfo, error) {
		for _, a := range acks {
			select { // the chunks sent must be stored or lost before the purge
			case <-a.Ok():
			case <-a.Err():
			case <-ctx.Done():
			}
		}
		pctx, cancel := context.WithTimeout(context.Background(), attemptTimeout)
		defer cancel()
		_ = b.st.Purge(pctx, jetstream.WithPurgeSubject(chunkSubj))
		return nil, err
	}
	for rest := stored; len(rest) > 0; {
		n := min(len(rest), int(b.chunk))
		h.Write(rest[:n])
		a, err := b.js.PublishMsgAsync(&nats.Msg{Subject: chunkSubj, Data: rest[:n]})
		if err != nil {
			return fail(err)
		}
		acks = append(acks, a)
		info.Chunks++
		info.Size += uint64(n)
		rest = rest[n:]
	}
	info.Digest = jetstream.GetObjectDigestValue(h)
	mb, err := json.Marshal(info)
	if err != nil {
		return fail(err)
	}
	mm := nats.NewMsg(metaSubj)
	mm.Header.Set(jetstream.MsgRollup, jetstream.MsgRollupSubject)
	mm.Data = mb
	var opts []jetstream.PublishOpt
	if last != nil {
		opts = append(opts, jetstream.WithExpectLastSequencePerSubject(*last))
	}
	a, err := b.js.PublishMsgAsync(mm, opts...)
	if err != nil {
		return fail(err)
	}
	for acks = append(acks, a); len(acks) > 0; {
		a := acks[0]
		acks = acks[1:]
		select {
		case <-a.Ok():
		case err := <-a.Err():
			var apiErr *jetstream.APIError
			if errors.As(err, &apiErr) && (apiErr.ErrorCode == jetstream.JSErrCodeStreamWrongLastSequence ||
				apiErr.ErrorCode == jetstream.JSErrCodeStreamWrongLastSequenceConstant) {
				err = errRaced
			}
			return fail(err)
		case <-ctx.Done():
			return fail(ctx.Err())
		}
	}
	return info, nil
}

// Get implements jobs.Blobs. The object is read whole: its metadata,
// then each chunk by a message get (answered by the stream's leader),
// each request retried through a node failure, and the result checked
// against the object's size and SHA-256 digest. An object replaced while
// it is read is read again.
//
// Get does not use the object store's own reader: that one creates an
// ephemeral ordered push consumer for every read, a request the JetStream
// meta leader must place on a replica and the replica answer. After a node
// stops, such requests can go unanswered for many seconds (the consumer is
// never created), so every read waited out its whole time limit while
// key-value reads, plain requests to the stream leader, went on working.
// Chunk reads here are such plain requests too (see readChunks).
//
// Contents this process wrote or read lately are kept (readCache) and
// returned when the metadata names the same object, without reading its
// chunks again; result files are not kept (they are read on download).
func (b *Blobs) Get(ctx context.Context, key string) (io.ReadCloser, error) {
	if !jobs.ValidKey(key) {
		return nil, fmt.Errorf("blob key %q: not a list of names from [A-Za-z0-9._-] separated by /", key)
	}
	var data []byte
	var err error
	for range maxRereads {
		var info *jetstream.ObjectInfo
		err = retry(ctx, func(ctx context.Context) error {
			var err error
			info, err = b.obj.GetInfo(ctx, key)
			return err
		})
		if errors.Is(err, jetstream.ErrObjectNotFound) {
			return nil, fmt.Errorf("blob %s: %w", key, jobs.ErrNotFound)
		}
		if err != nil {
			return nil, fmt.Errorf("blob %s: %w", key, err)
		}
		if data = b.cache.get(key, info.NUID, info.Digest); data != nil {
			break
		}
		data, err = b.readChunks(ctx, info)
		if err == nil {
			data, err = decode(info, data)
		}
		if err == nil && !writeOnce(key) {
			b.cache.put(key, info.NUID, info.Digest, data)
		}
		if !errors.Is(err, errChanged) {
			break
		}
	}
	if err != nil {
		return nil, fmt.Errorf("blob %s: %w", key, err)
	}
	return io.NopCloser(bytes.NewReader(data)), nil
}

// maxRereads bounds how often Get starts again on an object replaced
// while it was read.
const maxRereads = 3

// errChanged reports an object replaced or deleted during a read.
var errChanged = errors.New("object changed while it was read")

// readChunks reads the chunks of the object described by info. Each
// chunk is fetched with a stream message get for the next message on the
// object's chunk subject at or after the sequence following the previous
// chunk (nextChunk): a request and its answer, retried as any other, so a
// read goes on after a reconnect exactly as key-value reads do.
func (b *Blobs) readChunks(ctx context.Context, info *jetstream.ObjectInfo) ([]byte, error) {
	if info.NUID == "" || info.Opts != nil && info.Opts.Link != nil {
		// The service writes neither empty metadata nor links.
		return nil, jetstream.ErrBadObjectMeta
	}
	subject := "$O." + b.bucket + ".C." + info.NUID
	data := make([]byte, 0, info.Size)
	h := sha256.New()
	seq := uint64(1)
	for range info.Chunks {
		n := len(data)
		var next uint64
		b.chunkReads.Add(1)
		err := retry(ctx, func(ctx context.Context) error {
			var err error
			next, data, err = b.nextChunk(ctx, subject, seq, data[:n])
			return err
		})
		if errors.Is(err, jetstream.ErrMsgNotFound) {
			return nil, errChanged // purged: the object was replaced or deleted
		}
		if err != nil {
			return nil, fmt.Errorf("chunk after sequence %d: %w", seq-1, err)
		}
		h.Write(data[n:])
		seq = next + 1
	}
	if uint64(len(data)) != info.Size || digest(h.Sum(nil)) != info.Digest {
		return nil, fmt.Errorf("%w: %d bytes in %d chunks, digest %s; metadata says %d bytes, digest %s",
			errChanged, len(data), info.Chunks, digest(h.Sum(nil)), info.Size, info.Digest)
	}
	return data, nil
}

// msgGetReply is the answer of the JetStream API to a stream message get
// ($JS.API.STREAM.MSG.GET.<stream>), without its data (see nextChunk).
type msgGetReply struct {
	Error   *jetstream.APIError `json:"error"`
	Message *struct {
		Subject string `json:"subject"`
		Seq     uint64 `json:"seq"`
	} `json:"message"`
}

// dataField opens the message's data, base64 in a JSON string, in a
// message get answer.
var dataField = []byte(`"data":"`)

// nextChunk appends to dst the data of the first message at or after
// sequence seq on subject, asked of the stream's leader with a message get
// (the request jetstream.Stream.GetMsg makes when direct reads are off),
// and returns the message's sequence.
//
// It decodes the answer itself: the data is base64 in a JSON string, and
// encoding/json spent more on it (validating, unquoting and copying the
// string, then decoding it) than the rest of the read: about 40 ms of
// worker CPU per frame of BenchmarkClusterSeries. Here the string is
// decoded from base64 straight into dst, and the rest of the answer, with
// the string emptied, by encoding/json. Base64 holds neither quotes nor
// backslashes, so the string ends at the next quote; an answer written
// otherwise would fail the object's digest, which readChunks checks.
func (b *Blobs) nextChunk(ctx context.Context, subject string, seq uint64, dst []byte) (uint64, []byte, error) {
	req, err := json.Marshal(struct {
		Seq     uint64 `json:"seq"`
		NextFor string `json:"next_by_subj"`
	}{seq, subject})
	if err != nil {
		return 0, dst, err
	}
	m, err := b.nc.RequestWithContext(ctx, "$JS.API.STREAM.MSG.GET."+b.stream, req)
	if err != nil {
		return 0, dst, err
	}
	body := m.Data
	var enc []byte
	if i := bytes.Index(body, dataField); i >= 0 {
		start := i + len(dataField)
		n := bytes.IndexByte(body[start:], '"')
		if n < 0 {
			return 0, dst, errors.New("message get: the data string is not closed")
		}
		enc = body[start : start+n]
		body = append(body[:start:start], body[start+n:]...) // the rest, with "data":""
	}
	var r msgGetReply
	if err := json.Unmarshal(body, &r); err != nil {
		return 0, dst, fmt.Errorf("message get: %w", err)
	}
	if r.Error != nil {
		if r.Error.ErrorCode == jetstream.JSErrCodeMessageNotFound {
			return 0, dst, jetstream.ErrMsgNotFound
		}
		return 0, dst, r.Error
	}
	if r.Message == nil || r.Message.Subject != subject || r.Message.Seq < seq {
		return 0, dst, jetstream.ErrInvalidJetStreamResponse
	}
	n := base64.StdEncoding.DecodedLen(len(enc))
	dst = slices.Grow(dst, n)
	k, err := base64.StdEncoding.Decode(dst[len(dst):len(dst)+n], enc)
	if err != nil {
		return 0, dst, fmt.Errorf("message get: data: %w", err)
	}
	return r.Message.Seq, dst[:len(dst)+k], nil
}

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
			b.cache.drop(name)
			err := retry(ctx, func(ctx context.Context) error { return b.obj.Delete(ctx, name) })
			if err != nil && !errors.Is(err, jetstream.ErrObjectNotFound) {
				errs = append(errs, fmt.Errorf("delete blob %s: %w", info.Name, err))
			}
		}
	}
	return errors.Join(errs...)
}

// DeleteKey implements jobs.KeyDeleter: it removes the object named key
// with no listing of the store, whose cost Delete pays for every call and
// which grows with the objects stored (a long series deletes the state it
// continued from at every frame).
func (b *Blobs) DeleteKey(ctx context.Context, key string) error {
	if !jobs.ValidKey(key) {
		return fmt.Errorf("blob key %q: not a list of names from [A-Za-z0-9._-] separated by /", key)
	}
	b.cache.drop(key)
	err := retry(ctx, func(ctx context.Context) error { return b.obj.Delete(ctx, key) })
	if err != nil && !errors.Is(err, jetstream.ErrObjectNotFound) {
		return fmt.Errorf("delete blob %s: %w", key, err)
	}
	return nil
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

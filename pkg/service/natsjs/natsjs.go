// Package natsjs is the distributed backend of the Mottle service: the
// job model of package jobs on NATS JetStream, so that one API node
// (mottle serve) and any number of workers (mottle worker) on other
// machines share one set of jobs.
//
// Mapping of the job model:
//
//	jobs.Queue  work-queue stream <PREFIX>_JOBS, subjects
//	            <prefix>.jobs.analysis and <prefix>.jobs.frame.<series>,
//	            one durable pull consumer "workers" with explicit
//	            acknowledgement, an acknowledgement deadline (AckWait)
//	            renewed by heartbeats (in-progress acknowledgements) while a
//	            job runs, and a maximum delivery count
//	jobs.Blobs  object store <prefix>-blobs, one object per blob key
//	jobs.Store  key-value bucket <prefix>-state, keys job.<id> and
//	            series.<id>, JSON records updated by compare-and-swap on
//	            the key's revision
//	progress    core NATS subject <prefix>.progress.<id> (advisory, not stored)
//	dead letters stream <PREFIX>_DEAD, subjects <prefix>.dead.<kind>: one
//	            message per job that failed or ran out of deliveries, with
//	            the failure reason
//	jobs.Audit  stream <PREFIX>_AUDIT, subjects <prefix>.audit.<resource>:
//	            the append-only audit trail (no limits, deletes and purges
//	            refused), an entry's Seq its stream sequence
//
// Delivery is at least once. It is made safe thus: a job is claimed by a
// compare-and-swap of its record from queued to running, so two workers
// never both start it from one delivery; a redelivered job whose record
// still says running (its worker died) is put back to queued and started
// again; result objects are written once per job and file name, and a
// second write is compared by SHA-256 content hash and dropped, so a job
// computed twice keeps its first answer; a succeeded record is final. A
// redelivered job therefore never produces a duplicate or a different
// answer.
//
// Series order: frame n of a series starts from the tracker state after
// frame n−1, and the service holds a frame back (and puts it back in the
// queue) until the frame before it has finished. Frames are published on
// one subject per series; a job put back is published again at the end of
// the queue rather than negatively acknowledged, so that holding a frame
// back for its turn never uses up its deliveries and the jobs behind it,
// of other series, get theirs. Series therefore run in parallel, each in
// order, and analyses run in parallel with everything.
//
// Reads: the key-value and object streams answer reads from their leader
// only (direct reads from replicas are turned off), and listings wait for
// the mirror to catch up with the bucket's last revision, so every read
// sees every write acknowledged before it began. A process keeps the
// contents of blobs it wrote or read lately and uses them when the
// object's metadata, read from the leader, names the same object (see
// Blobs.Get), so that this holds for blob reads too.
package natsjs

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net/url"
	"strconv"
	"strings"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// Options configure the backend. Zero fields take the documented defaults.
type Options struct {
	// Servers are the NATS server URLs (nats://host:port, tls://…); the
	// client connects to any of them and fails over to the others.
	// Required.
	Servers []string
	// Credentials is an optional NATS credentials file (user JWT and nkey).
	Credentials string
	// Name is the connection name shown by the NATS server's monitoring;
	// default "mottle".
	Name string
	// Prefix names the subjects, streams and buckets; default "mottle".
	// Several independent Mottle installations can share a NATS cluster
	// with different prefixes. Letters, digits, '-' and '_' only.
	Prefix string
	// Replicas is the number of copies JetStream keeps of every stream
	// and bucket, 1–5. Default: the replica count of the existing job
	// stream; for a new one, 3 when the server is part of a cluster and
	// 1 otherwise. With 3 replicas the service goes on when one node of a
	// three-node cluster stops.
	Replicas int
	// QueueCap is the number of jobs that may wait for a worker; Enqueue
	// answers jobs.ErrQueueFull beyond it. Default 64.
	QueueCap int
	// AckWait is how long a delivered job may go without a heartbeat
	// before it is delivered to another worker; a running job sends a
	// heartbeat every AckWait/3. Default 30 s.
	AckWait time.Duration
	// MaxDeliver is the largest number of deliveries of one job (a job
	// put back by its worker is published anew and starts again from 1).
	// On the last one a job that has not finished is failed and
	// dead-lettered instead of started. Default 10, at least 2.
	MaxDeliver int
	// Compress, when true, has Put store blobs of 64 KiB or more deflated
	// when that saves a fifth of their bytes or more (the JSON results and
	// series states; images and archives are stored as they are), with
	// the encoding in the object's metadata, so that fewer bytes are
	// stored, replicated and read back. Get reads either form and returns
	// the contents as written. Versions before this option read a deflated
	// object as its deflated bytes: turn it on only once every process of
	// the installation (API nodes and workers) is of this version or
	// later. Default false.
	Compress bool
	// Work is true in a process that computes jobs. When false (an API
	// node) Dequeue blocks until its context ends, so the service's
	// worker pool stays idle.
	Work bool
	// Logger receives warnings (connection changes, dead letters, pulls
	// and put-backs that keep failing, at most one per 10 s of each);
	// default slog.Default().
	Logger *slog.Logger
}

func (o *Options) defaults() {
	if o.Name == "" {
		o.Name = "mottle"
	}
	if o.Prefix == "" {
		o.Prefix = "mottle"
	}
	if o.QueueCap <= 0 {
		o.QueueCap = 64
	}
	if o.AckWait <= 0 {
		o.AckWait = 30 * time.Second
	}
	if o.MaxDeliver == 0 {
		o.MaxDeliver = 10
	}
	if o.Logger == nil {
		o.Logger = slog.Default()
	}
}

// Validate reports every problem with the options at once (after
// defaults).
func (o Options) Validate() error {
	o.defaults()
	var errs []error
	if len(o.Servers) == 0 {
		errs = append(errs, errors.New("nats backend: no server URL; use nats://host:4222 (comma-separated for a cluster)"))
	}
	for _, s := range o.Servers {
		u, err := url.Parse(s)
		if err != nil || (u.Scheme != "nats" && u.Scheme != "tls") || u.Host == "" {
			errs = append(errs, fmt.Errorf("nats backend: server %q: use nats://host:port or tls://host:port", s))
		}
	}
	if !validPrefix(o.Prefix) {
		errs = append(errs, fmt.Errorf("nats backend: prefix %q: use 1–32 letters, digits, '-' or '_'", o.Prefix))
	}
	if o.Replicas < 0 || o.Replicas > 5 {
		errs = append(errs, fmt.Errorf("nats backend: replicas %d: use 1 to 5 (JetStream's limit), or 0 for the default", o.Replicas))
	}
	if o.AckWait < 100*time.Millisecond {
		errs = append(errs, fmt.Errorf("nats backend: ack wait %v: use at least 100ms (heartbeats are sent every third of it)", o.AckWait))
	}
	if o.MaxDeliver < 2 {
		errs = append(errs, fmt.Errorf("nats backend: max deliver %d: use at least 2, so a job can be redelivered once", o.MaxDeliver))
	}
	return errors.Join(errs...)
}

func validPrefix(s string) bool {
	if len(s) == 0 || len(s) > 32 {
		return false
	}
	for i := 0; i < len(s); i++ {
		c := s[i]
		if !('0' <= c && c <= '9' || 'a' <= c && c <= 'z' || 'A' <= c && c <= 'Z' || c == '-' || c == '_') {
			return false
		}
	}
	return true
}

// ParseURL parses a backend URL of the form
//
//	nats://host1:4222,nats://host2:4222,nats://host3:4222?prefix=mottle&replicas=3
//
// Query parameters (all optional): prefix, replicas, queue (QueueCap),
// ack_wait (a Go duration such as 30s), max_deliver, creds (a
// credentials file), compress (true or false, see Options.Compress). The servers may also be given
// without a scheme after the first ("nats://h1:4222,h2:4222").
func ParseURL(spec string) (Options, error) {
	var o Options
	servers, query, _ := strings.Cut(spec, "?")
	for _, s := range strings.Split(servers, ",") {
		s = strings.TrimSpace(s)
		if s == "" {
			continue
		}
		if !strings.Contains(s, "://") {
			s = "nats://" + s
		}
		o.Servers = append(o.Servers, s)
	}
	q, err := url.ParseQuery(query)
	if err != nil {
		return o, fmt.Errorf("nats backend %q: query: %w", spec, err)
	}
	var errs []error
	num := func(name string, dst *int) {
		if v := q.Get(name); v != "" {
			n, err := strconv.Atoi(v)
			if err != nil {
				errs = append(errs, fmt.Errorf("nats backend: %s=%q: use a whole number", name, v))
			}
			*dst = n
		}
	}
	for name := range q {
		switch name {
		case "prefix", "replicas", "queue", "ack_wait", "max_deliver", "creds", "compress":
		default:
			errs = append(errs, fmt.Errorf("nats backend: unknown parameter %q; use prefix, replicas, queue, ack_wait, max_deliver, creds or compress", name))
		}
	}
	o.Prefix = q.Get("prefix")
	o.Credentials = q.Get("creds")
	num("replicas", &o.Replicas)
	num("queue", &o.QueueCap)
	num("max_deliver", &o.MaxDeliver)
	if v := q.Get("compress"); v != "" {
		c, err := strconv.ParseBool(v)
		if err != nil {
			errs = append(errs, fmt.Errorf("nats backend: compress=%q: use true or false", v))
		}
		o.Compress = c
	}
	if v := q.Get("ack_wait"); v != "" {
		d, err := time.ParseDuration(v)
		if err != nil {
			errs = append(errs, fmt.Errorf("nats backend: ack_wait=%q: use a duration such as 30s", v))
		}
		o.AckWait = d
	}
	if len(errs) > 0 {
		return o, errors.Join(errs...)
	}
	return o, o.Validate()
}

// IsURL reports whether a --backend value names this backend (it starts
// with nats:// or tls://).
func IsURL(spec string) bool {
	return strings.HasPrefix(spec, "nats://") || strings.HasPrefix(spec, "tls://")
}

// names are the JetStream resources of one prefix.
type names struct {
	prefix      string
	jobStream   string // work-queue stream
	deadStream  string // dead letters
	auditStream string // the audit trail
	consumer    string
	kv          string
	objects     string
}

func namesFor(prefix string) names {
	up := strings.ToUpper(prefix)
	return names{prefix: prefix, jobStream: up + "_JOBS", deadStream: up + "_DEAD", auditStream: up + "_AUDIT",
		consumer: "workers", kv: prefix + "-state", objects: prefix + "-blobs"}
}

func (n names) analysisSubject() string        { return n.prefix + ".jobs.analysis" }
func (n names) frameSubject(ser string) string { return n.prefix + ".jobs.frame." + ser }
func (n names) progressSubject(id string) string {
	return n.prefix + ".progress." + id
}
func (n names) deadSubject(kind jobs.Kind) string   { return n.prefix + ".dead." + string(kind) }
func (n names) auditSubject(resource string) string { return n.prefix + ".audit." + resource }

// Backend is an open connection to the JetStream resources of one prefix.
// Its Store, Blobs and Queue implement the jobs interfaces; Jobs bundles
// them for the service.
type Backend struct {
	opt   Options
	n     names
	nc    *nats.Conn
	js    jetstream.JetStream
	store *Store
	blobs *Blobs
	queue *Queue
	audit *Audit
}

// Open connects to the servers, creates or updates the streams, the
// consumer and the buckets, and returns the backend. ctx bounds the
// connection and set-up, not the backend's life; call Close when done.
func Open(ctx context.Context, o Options) (*Backend, error) {
	if err := o.Validate(); err != nil {
		return nil, err
	}
	o.defaults()
	log := o.Logger
	copts := []nats.Option{
		nats.Name(o.Name),
		nats.MaxReconnects(-1),
		nats.ReconnectWait(250 * time.Millisecond),
		nats.RetryOnFailedConnect(false),
		nats.DisconnectErrHandler(func(_ *nats.Conn, err error) {
			if err != nil {
				log.Warn("nats disconnected", "error", err)
			}
		}),
		nats.ReconnectHandler(func(c *nats.Conn) { log.Info("nats reconnected", "server", c.ConnectedUrlRedacted()) }),
	}
	if o.Credentials != "" {
		copts = append(copts, nats.UserCredentials(o.Credentials))
	}
	nc, err := nats.Connect(strings.Join(o.Servers, ","), copts...)
	if err != nil {
		return nil, fmt.Errorf("connect to NATS at %s: %w (is nats-server running with JetStream enabled, -js?)", strings.Join(o.Servers, ","), err)
	}
	js, err := jetstream.New(nc)
	if err != nil {
		nc.Close()
		return nil, fmt.Errorf("nats jetstream: %w", err)
	}
	b := &Backend{opt: o, n: namesFor(o.Prefix), nc: nc, js: js}
	if err := b.setup(ctx); err != nil {
		nc.Close()
		return nil, err
	}
	return b, nil
}

// setup creates or updates every resource. It retries for a while: right
// after a cluster starts, JetStream may not have elected a leader yet.
func (b *Backend) setup(ctx context.Context) error {
	var err error
	for wait := 100 * time.Millisecond; ; wait = min(2*wait, 2*time.Second) {
		if err = b.setupOnce(ctx); err == nil {
			return nil
		}
		select {
		case <-ctx.Done():
			return fmt.Errorf("set up JetStream resources for prefix %q: %w (last error: %v)", b.opt.Prefix, ctx.Err(), err)
		case <-time.After(wait):
		}
	}
}

func (b *Backend) setupOnce(ctx context.Context) error {
	o, n := b.opt, b.n
	rctx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	r := o.Replicas
	if r == 0 {
		r = 1
		if b.nc.ConnectedClusterName() != "" {
			r = 3
		}
		if st, err := b.js.Stream(rctx, n.jobStream); err == nil {
			r = st.CachedInfo().Config.Replicas
		} else if !errors.Is(err, jetstream.ErrStreamNotFound) {
			return fmt.Errorf("job stream %s: %w", n.jobStream, err)
		}
	}
	js := b.js
	_, err := js.CreateOrUpdateStream(rctx, jetstream.StreamConfig{
		Name:        n.jobStream,
		Description: "Mottle jobs waiting for a worker (work queue)",
		Subjects:    []string{n.prefix + ".jobs.>"},
		Retention:   jetstream.WorkQueuePolicy,
		Storage:     jetstream.FileStorage,
		Replicas:    r,
		Discard:     jetstream.DiscardNew,
		// The hard limit; Enqueue keeps the waiting count at QueueCap.
		MaxMsgs:    int64(max(4*o.QueueCap, o.QueueCap+1024)),
		Duplicates: 2 * time.Minute,
	})
	if err != nil {
		return fmt.Errorf("job stream %s (replicas %d): %w", n.jobStream, r, err)
	}
	_, err = js.CreateOrUpdateStream(rctx, jetstream.StreamConfig{
		Name:        n.deadStream,
		Description: "Mottle jobs that failed, with the reason",
		Subjects:    []string{n.prefix + ".dead.>"},
		Retention:   jetstream.LimitsPolicy,
		Storage:     jetstream.FileStorage,
		Replicas:    r,
		MaxAge:      30 * 24 * time.Hour,
	})
	if err != nil {
		return fmt.Errorf("dead-letter stream %s: %w", n.deadStream, err)
	}
	if _, err := js.CreateOrUpdateStream(rctx, auditConfig(n, r)); err != nil {
		return fmt.Errorf("audit stream %s: %w", n.auditStream, err)
	}
	cons, err := js.CreateOrUpdateConsumer(rctx, n.jobStream, jetstream.ConsumerConfig{
		Durable:       n.consumer,
		Description:   "Mottle workers",
		AckPolicy:     jetstream.AckExplicitPolicy,
		AckWait:       o.AckWait,
		MaxDeliver:    o.MaxDeliver,
		MaxAckPending: 10000,
		Replicas:      r,
	})
	if err != nil {
		return fmt.Errorf("consumer %s on %s: %w", n.consumer, n.jobStream, err)
	}
	// The buckets are created once and then only bound, and their streams
	// set to answer reads from the leader only: a read then sees every
	// acknowledged write, which direct reads from a lagging replica do not
	// promise (a worker must see the series state another just stored).
	kvCfg := jetstream.KeyValueConfig{Bucket: n.kv, Description: "Mottle job and series records",
		History: 1, Storage: jetstream.FileStorage, Replicas: r}
	if _, err := js.KeyValue(rctx, n.kv); errors.Is(err, jetstream.ErrBucketNotFound) {
		if _, err := js.CreateKeyValue(rctx, kvCfg); err != nil && !errors.Is(err, jetstream.ErrBucketExists) {
			return fmt.Errorf("key-value bucket %s: %w", n.kv, err)
		}
	} else if err != nil {
		return fmt.Errorf("key-value bucket %s: %w", n.kv, err)
	}
	objCfg := jetstream.ObjectStoreConfig{Bucket: n.objects, Description: "Mottle images and results",
		Storage: jetstream.FileStorage, Replicas: r}
	if _, err := js.ObjectStore(rctx, n.objects); errors.Is(err, jetstream.ErrBucketNotFound) {
		if _, err := js.CreateObjectStore(rctx, objCfg); err != nil && !errors.Is(err, jetstream.ErrBucketExists) {
			return fmt.Errorf("object store %s: %w", n.objects, err)
		}
	} else if err != nil {
		return fmt.Errorf("object store %s: %w", n.objects, err)
	}
	for _, name := range []string{"KV_" + n.kv, "OBJ_" + n.objects} {
		if err := b.leaderReads(rctx, name); err != nil {
			return err
		}
	}
	kv, err := js.KeyValue(rctx, n.kv)
	if err != nil {
		return fmt.Errorf("key-value bucket %s: %w", n.kv, err)
	}
	obj, err := js.ObjectStore(rctx, n.objects)
	if err != nil {
		return fmt.Errorf("object store %s: %w", n.objects, err)
	}
	objStream, err := js.Stream(rctx, "OBJ_"+n.objects)
	if err != nil {
		return fmt.Errorf("object store %s: %w", n.objects, err)
	}
	b.store = newStore(b.nc, kv, n, o.Logger)
	b.blobs = &Blobs{obj: obj, js: js, st: objStream, nc: b.nc, stream: "OBJ_" + n.objects, bucket: n.objects, chunk: chunkSize(b.nc.MaxPayload()),
		compress: b.opt.Compress, cache: newReadCache(readCacheBytes)}
	b.queue = &Queue{b: b, cons: cons}
	b.audit = &Audit{js: js, stream: n.auditStream, n: n}
	return nil
}

// leaderReads turns off direct reads (answered by any replica) on stream
// name, so that the clients bound afterwards read from its leader.
func (b *Backend) leaderReads(ctx context.Context, name string) error {
	st, err := b.js.Stream(ctx, name)
	if err != nil {
		return fmt.Errorf("stream %s: %w", name, err)
	}
	cfg := st.CachedInfo().Config
	if !cfg.AllowDirect {
		return nil
	}
	cfg.AllowDirect = false
	if _, err := b.js.UpdateStream(ctx, cfg); err != nil {
		return fmt.Errorf("stream %s: turn off direct reads: %w", name, err)
	}
	return nil
}

// Store returns the jobs.Store.
func (b *Backend) Store() *Store { return b.store }

// Blobs returns the jobs.Blobs.
func (b *Backend) Blobs() *Blobs { return b.blobs }

// Queue returns the jobs.Queue.
func (b *Backend) Queue() *Queue { return b.queue }

// Conn returns the NATS connection (for status and tests).
func (b *Backend) Conn() *nats.Conn { return b.nc }

// Jobs returns the backend as a jobs.Backend for service.Config. It has
// no Recover: the job stream is durable and redelivers by itself.
func (b *Backend) Jobs() *jobs.Backend {
	return &jobs.Backend{Store: b.store, Blobs: b.blobs, Queue: b.queue, Audit: b.audit, Close: b.Close}
}

// Close stops watches and closes the connection after flushing what was
// published.
func (b *Backend) Close() error {
	if b.store != nil {
		b.store.Close()
	}
	if b.nc.IsClosed() {
		return nil
	}
	_ = b.nc.FlushTimeout(2 * time.Second)
	b.nc.Close()
	return nil
}

package natsjs

import (
	"context"
	"crypto/rand"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// Audit is the jobs.Audit of the NATS backend: the stream <PREFIX>_AUDIT,
// one message an entry on subject <prefix>.audit.<resource>, its stream
// sequence the entry's Seq. The stream keeps every message (no age, size
// or count limit) and refuses deletes and purges (deny_delete,
// deny_purge), so entries are never removed through the API; it is
// written to disk on every node holding a replica.
type Audit struct {
	js     jetstream.JetStream
	stream string
	n      names
}

// Audit returns the audit trail.
func (b *Backend) Audit() *Audit { return b.audit }

func auditConfig(n names, replicas int) jetstream.StreamConfig {
	return jetstream.StreamConfig{
		Name:        n.auditStream,
		Description: "Mottle audit trail (append-only)",
		Subjects:    []string{n.prefix + ".audit.>"},
		Retention:   jetstream.LimitsPolicy,
		Storage:     jetstream.FileStorage,
		Replicas:    replicas,
		Discard:     jetstream.DiscardNew,
		DenyDelete:  true,
		DenyPurge:   true,
		// Retried publishes of one entry, and the same token change seen
		// by two API nodes, are dropped within this window.
		Duplicates: 2 * time.Minute,
	}
}

func validResource(s string) bool {
	if s == "" || len(s) > 32 {
		return false
	}
	for i := 0; i < len(s); i++ {
		if c := s[i]; !('a' <= c && c <= 'z' || c == '-') {
			return false
		}
	}
	return true
}

// Append implements jobs.Audit. The message id is e.Dedupe's digest or a
// random one, so a publish retried after a lost acknowledgement stores
// the entry once.
func (a *Audit) Append(ctx context.Context, e *jobs.AuditEntry) error {
	if !validResource(e.Resource) {
		return fmt.Errorf("audit entry: resource %q: use one of the jobs.Audit resource names", e.Resource)
	}
	c := *e
	c.Seq = 0
	data, err := json.Marshal(&c)
	if err != nil {
		return fmt.Errorf("audit entry: %w", err)
	}
	var id string
	if e.Dedupe != "" {
		sum := sha256.Sum256([]byte(e.Dedupe))
		id = "d-" + hex.EncodeToString(sum[:16])
	} else {
		var b [16]byte
		_, _ = rand.Read(b[:])
		id = "r-" + hex.EncodeToString(b[:])
	}
	var ack *jetstream.PubAck
	err = retry(ctx, func(ctx context.Context) error {
		var err error
		ack, err = a.js.Publish(ctx, a.n.auditSubject(e.Resource), data, jetstream.WithMsgID(id), jetstream.WithExpectStream(a.stream))
		return err
	})
	if err != nil {
		return fmt.Errorf("audit entry: publish to %s: %w", a.stream, err)
	}
	e.Seq = ack.Sequence
	return nil
}

// sinceMargin is how much earlier than AuditFilter.Since a read starts
// by stream time, for clock differences between API nodes and servers.
const sinceMargin = time.Hour

// auditBatch is the most entries fetched in one request.
const auditBatch = 256

// AuditEntries implements jobs.Audit. It reads through an ephemeral
// consumer of the stream, from After or Since, and deletes it after.
func (a *Audit) AuditEntries(ctx context.Context, f jobs.AuditFilter) ([]*jobs.AuditEntry, error) {
	cfg := jetstream.ConsumerConfig{
		AckPolicy:         jetstream.AckNonePolicy,
		DeliverPolicy:     jetstream.DeliverAllPolicy,
		InactiveThreshold: time.Minute,
		MemoryStorage:     true,
		Replicas:          1,
	}
	switch {
	case f.After > 0:
		cfg.DeliverPolicy, cfg.OptStartSeq = jetstream.DeliverByStartSequencePolicy, f.After+1
	case !f.Since.IsZero():
		// The stream starts by its own receive time, the entry's Time is
		// the API node's clock: start an hour early, filter exactly below.
		since := f.Since.Add(-sinceMargin)
		cfg.DeliverPolicy, cfg.OptStartTime = jetstream.DeliverByStartTimePolicy, &since
	}
	if f.Resource != "" {
		if !validResource(f.Resource) {
			return nil, fmt.Errorf("audit trail: resource %q is not a resource name", f.Resource)
		}
		cfg.FilterSubject = a.n.auditSubject(f.Resource)
	}
	var cons jetstream.Consumer
	err := retry(ctx, func(ctx context.Context) error {
		var err error
		cons, err = a.js.CreateConsumer(ctx, a.stream, cfg)
		return err
	})
	if err != nil {
		return nil, fmt.Errorf("audit trail: read %s: %w", a.stream, err)
	}
	name := cons.CachedInfo().Name
	defer func() {
		dctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), attemptTimeout)
		defer cancel()
		_ = a.js.DeleteConsumer(dctx, a.stream, name)
	}()
	pending := cons.CachedInfo().NumPending
	var out []*jobs.AuditEntry
	for pending > 0 && (f.Limit <= 0 || len(out) < f.Limit) {
		if out, pending, err = a.fetch(ctx, cons, pending, f, out); err != nil {
			return nil, err
		}
	}
	return out, nil
}

// fetch reads the next batch of at most pending entries from cons,
// appends those matching f to out, and returns the count still pending.
func (a *Audit) fetch(ctx context.Context, cons jetstream.Consumer, pending uint64, f jobs.AuditFilter, out []*jobs.AuditEntry) ([]*jobs.AuditEntry, uint64, error) {
	fctx, cancel := context.WithTimeout(ctx, attemptTimeout)
	defer cancel()
	batch, err := cons.Fetch(int(min(pending, auditBatch)), jetstream.FetchContext(fctx))
	if err != nil {
		return nil, 0, fmt.Errorf("audit trail: read %s: %w", a.stream, err)
	}
	got := 0
	for m := range batch.Messages() {
		got++
		meta, err := m.Metadata()
		if err != nil {
			return nil, 0, fmt.Errorf("audit trail: %w", err)
		}
		pending = meta.NumPending
		var e jobs.AuditEntry
		if err := json.Unmarshal(m.Data(), &e); err != nil {
			return nil, 0, fmt.Errorf("audit trail: entry %d: corrupt record: %w", meta.Sequence.Stream, err)
		}
		e.Seq = meta.Sequence.Stream
		if f.Match(&e) && (f.Limit <= 0 || len(out) < f.Limit) {
			out = append(out, &e)
		}
	}
	if err := batch.Error(); err != nil && !errors.Is(err, jetstream.ErrNoMessages) {
		return nil, 0, fmt.Errorf("audit trail: read %s: %w", a.stream, err)
	}
	if got == 0 {
		return nil, 0, fmt.Errorf("audit trail: read %s: no entries delivered within %v although %d are pending", a.stream, attemptTimeout, pending)
	}
	return out, pending, nil
}

package embedded

import (
	"bytes"
	"context"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"

	bolt "go.etcd.io/bbolt"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// The audit trail lives in the job database: bucket "audit" holds each
// entry as JSON under its sequence number (8 bytes, big-endian, so keys
// sort in trail order), and bucket "audit-index" a key resource, NUL,
// sequence number for each, so that the entries of one resource kind
// (the token changes the service reads at start) are found without
// reading the whole trail. Nothing in this package updates or deletes
// either bucket.
var (
	bucketAudit      = []byte("audit")
	bucketAuditIndex = []byte("audit-index")
)

// Audit is the jobs.Audit of the embedded backend, on the Store's
// database. Every Append is committed and fsynced (unless the backend
// was opened with NoSync) before it returns.
type Audit struct{ db *bolt.DB }

// Audit returns the audit trail kept in the store's database.
func (s *Store) Audit() *Audit { return &Audit{db: s.db} }

func seqKey(n uint64) []byte {
	var k [8]byte
	binary.BigEndian.PutUint64(k[:], n)
	return k[:]
}

// Append implements jobs.Audit.
func (a *Audit) Append(ctx context.Context, e *jobs.AuditEntry) error {
	if e.Resource == "" || bytes.IndexByte([]byte(e.Resource), 0) >= 0 {
		return fmt.Errorf("audit entry: resource %q: use one of the jobs.Audit resource names", e.Resource)
	}
	return a.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketAudit)
		n, err := b.NextSequence()
		if err != nil {
			return fmt.Errorf("audit entry: %w", err)
		}
		c := *e
		c.Seq = n
		data, err := json.Marshal(&c)
		if err != nil {
			return fmt.Errorf("audit entry: %w", err)
		}
		if err := b.Put(seqKey(n), data); err != nil {
			return fmt.Errorf("audit entry %d: %w", n, err)
		}
		ik := append(append([]byte(e.Resource), 0), seqKey(n)...)
		if err := tx.Bucket(bucketAuditIndex).Put(ik, nil); err != nil {
			return fmt.Errorf("audit entry %d: index: %w", n, err)
		}
		e.Seq = n
		return nil
	})
}

// AuditEntries implements jobs.Audit.
func (a *Audit) AuditEntries(ctx context.Context, f jobs.AuditFilter) ([]*jobs.AuditEntry, error) {
	var out []*jobs.AuditEntry
	full := errors.New("limit reached")
	err := a.db.View(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketAudit)
		take := func(k, v []byte) error {
			if err := ctx.Err(); err != nil {
				return err
			}
			var e jobs.AuditEntry
			if err := json.Unmarshal(v, &e); err != nil {
				return fmt.Errorf("audit entry %d: corrupt record: %w", binary.BigEndian.Uint64(k), err)
			}
			if f.Match(&e) {
				out = append(out, &e)
				if f.Limit > 0 && len(out) >= f.Limit {
					return full
				}
			}
			return nil
		}
		if f.Resource != "" {
			prefix := append([]byte(f.Resource), 0)
			c := tx.Bucket(bucketAuditIndex).Cursor()
			for k, _ := c.Seek(append(prefix, seqKey(f.After+1)...)); k != nil && bytes.HasPrefix(k, prefix); k, _ = c.Next() {
				sk := k[len(prefix):]
				if err := take(sk, b.Get(sk)); err != nil {
					return err
				}
			}
			return nil
		}
		c := b.Cursor()
		for k, v := c.Seek(seqKey(f.After + 1)); k != nil; k, v = c.Next() {
			if err := take(k, v); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil && err != full {
		return nil, fmt.Errorf("audit trail: %w", err)
	}
	return out, nil
}

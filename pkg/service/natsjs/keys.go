package natsjs

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"

	"github.com/nats-io/nats.go/jetstream"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// CreateKey implements jobs.Store. Key records are read from the bucket,
// never from the mirror (which ignores them), so every instance sees the
// latest.
func (s *Store) CreateKey(ctx context.Context, k *jobs.Key) error {
	if !jobs.ValidKeyID(k.ID) {
		return fmt.Errorf("idempotency key record %q: %w", k.ID, jobs.ErrNotFound)
	}
	data, err := json.Marshal(k)
	if err != nil {
		return err
	}
	_, err = s.create(ctx, idemKey(k.ID), data)
	if errors.Is(err, jetstream.ErrKeyExists) {
		return fmt.Errorf("idempotency key %s: %w", k.ID, jobs.ErrExists)
	}
	return mapErr("create idempotency key "+k.ID, err)
}

// Key implements jobs.Store.
func (s *Store) Key(ctx context.Context, id string) (*jobs.Key, error) {
	if !jobs.ValidKeyID(id) {
		return nil, fmt.Errorf("idempotency key %s: %w", id, jobs.ErrNotFound)
	}
	e, err := s.get(ctx, idemKey(id))
	if err != nil {
		return nil, mapErr("idempotency key "+id, err)
	}
	var k jobs.Key
	if err := json.Unmarshal(e.Value(), &k); err != nil {
		return nil, fmt.Errorf("idempotency key %s: corrupt record: %w", id, err)
	}
	return &k, nil
}

// PutKey implements jobs.Store.
func (s *Store) PutKey(ctx context.Context, k *jobs.Key) error {
	if !jobs.ValidKeyID(k.ID) {
		return fmt.Errorf("idempotency key record %q: %w", k.ID, jobs.ErrNotFound)
	}
	data, err := json.Marshal(k)
	if err != nil {
		return err
	}
	err = retry(ctx, func(ctx context.Context) error {
		_, err := s.kv.Put(ctx, idemKey(k.ID), data)
		return err
	})
	return mapErr("store idempotency key "+k.ID, err)
}

// DeleteKey implements jobs.Store.
func (s *Store) DeleteKey(ctx context.Context, id string) error {
	if !jobs.ValidKeyID(id) {
		return nil
	}
	err := retry(ctx, func(ctx context.Context) error { return s.kv.Delete(ctx, idemKey(id)) })
	if errors.Is(err, jetstream.ErrKeyNotFound) {
		return nil
	}
	return mapErr("delete idempotency key "+id, err)
}

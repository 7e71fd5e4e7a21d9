package natsjs

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"sort"

	"github.com/nats-io/nats.go/jetstream"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// CreateSeries implements jobs.Store.
func (s *Store) CreateSeries(ctx context.Context, sr *jobs.Series) error {
	if err := jobs.CheckID("series", sr.ID); err != nil {
		return err
	}
	data, err := json.Marshal(sr)
	if err != nil {
		return err
	}
	rev, err := s.create(ctx, seriesKey(sr.ID), data)
	if errors.Is(err, jetstream.ErrKeyExists) {
		return fmt.Errorf("series %s: %w", sr.ID, jobs.ErrExists)
	}
	if err != nil {
		return mapErr("create series "+sr.ID, err)
	}
	c := *sr
	s.applySeries(rev, sr.ID, &c)
	return nil
}

func (s *Store) getSeries(ctx context.Context, id string) (*jobs.Series, uint64, error) {
	if !jobs.ValidID(id) {
		return nil, 0, fmt.Errorf("series %s: %w", id, jobs.ErrNotFound)
	}
	e, err := s.get(ctx, seriesKey(id))
	if err != nil {
		return nil, 0, mapErr("series "+id, err)
	}
	var sr jobs.Series
	if err := json.Unmarshal(e.Value(), &sr); err != nil {
		return nil, 0, fmt.Errorf("series %s: corrupt record: %w", id, err)
	}
	return &sr, e.Revision(), nil
}

// Series implements jobs.Store.
func (s *Store) Series(ctx context.Context, id string) (*jobs.Series, error) {
	sr, _, err := s.getSeries(ctx, id)
	return sr, err
}

// UpdateSeries implements jobs.Store by compare-and-swap.
func (s *Store) UpdateSeries(ctx context.Context, id string, fn func(*jobs.Series) error) (*jobs.Series, error) {
	for try := 0; ; try++ {
		// The first try from the mirror's record, as UpdateJob.
		sr, rev, ok := new(jobs.Series), uint64(0), false
		if try == 0 {
			rev, ok = s.mirrored(func() (uint64, any, bool) { e, ok := s.series[id]; return e.rev, e.s, ok }, sr)
		}
		if !ok {
			var err error
			if sr, rev, err = s.getSeries(ctx, id); err != nil {
				return nil, err
			}
		}
		if err := fn(sr); err != nil {
			return nil, err
		}
		if sr.ID != id {
			return nil, fmt.Errorf("series %s: update changed the id to %s", id, sr.ID)
		}
		data, err := json.Marshal(sr)
		if err != nil {
			return nil, err
		}
		nrev, err := s.update(ctx, seriesKey(id), data, rev)
		if errors.Is(err, jetstream.ErrKeyRevisionMismatch) || errors.Is(err, jetstream.ErrKeyExists) {
			continue
		}
		if err != nil {
			return nil, mapErr("update series "+id, err)
		}
		c := *sr
		s.applySeries(nrev, id, &c)
		return sr, nil
	}
}

// DeleteSeries implements jobs.Store.
func (s *Store) DeleteSeries(ctx context.Context, id string) error {
	if _, _, err := s.getSeries(ctx, id); err != nil {
		return err
	}
	if err := retry(ctx, func(ctx context.Context) error { return s.kv.Delete(ctx, seriesKey(id)) }); err != nil {
		return mapErr("delete series "+id, err)
	}
	s.mu.Lock()
	delete(s.series, id)
	s.mu.Unlock()
	return nil
}

// AllSeries implements jobs.Store from the mirror.
func (s *Store) AllSeries(ctx context.Context) ([]*jobs.Series, error) {
	if err := s.start(ctx); err != nil {
		return nil, err
	}
	if err := s.sync(ctx); err != nil && ctx.Err() != nil {
		return nil, ctx.Err()
	}
	s.mu.Lock()
	out := make([]*jobs.Series, 0, len(s.series))
	for _, e := range s.series {
		c := *e.s
		out = append(out, &c)
	}
	s.mu.Unlock()
	sort.Slice(out, func(a, b int) bool {
		if !out[a].Created.Equal(out[b].Created) {
			return out[a].Created.Before(out[b].Created)
		}
		return out[a].ID < out[b].ID
	})
	return out, nil
}

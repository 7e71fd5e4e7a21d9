package natsjs

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// Store is a jobs.Store on a JetStream key-value bucket. Records are JSON
// under job.<id> and series.<id>; updates are compare-and-swap on the
// key's revision, retried on conflict.
//
// Reads of one record go to the bucket. Listings (Jobs, Counts, AllSeries)
// and Watch are answered from a mirror of the bucket kept up to date by a
// key-value watch, started on first use; a process that only computes jobs
// never starts it. Progress travels on core NATS subjects and is kept in
// memory by the processes that watch.
type Store struct {
	nc  *nats.Conn
	kv  jetstream.KeyValue
	n   names
	log *slog.Logger

	// routes remembers the kind and series of jobs created here, so
	// Enqueue can pick the subject without reading the record back.
	routes sync.Map // id → route

	startOnce sync.Once
	startErr  error
	ready     chan struct{}
	stop      context.CancelFunc

	mu       sync.Mutex
	jobs     map[string]jobEntry
	series   map[string]seriesEntry
	progress map[string]jobs.Progress
	watchers jobs.Watchers
	closed   bool
	// watched is the highest bucket revision the mirror's watch has
	// delivered: the mirror holds every write up to it.
	watched uint64
}

type route struct {
	kind   jobs.Kind
	series string
}

type jobEntry struct {
	rev uint64
	j   *jobs.Job
}

type seriesEntry struct {
	rev uint64
	s   *jobs.Series
}

func newStore(nc *nats.Conn, kv jetstream.KeyValue, n names, log *slog.Logger) *Store {
	return &Store{nc: nc, kv: kv, n: n, log: log, ready: make(chan struct{}),
		jobs: map[string]jobEntry{}, series: map[string]seriesEntry{},
		progress: map[string]jobs.Progress{}}
}

func jobKey(id string) string    { return "job." + id }
func seriesKey(id string) string { return "series." + id }
func idemKey(id string) string   { return "key." + id }

// get reads key, retrying through transient failures.
func (s *Store) get(ctx context.Context, key string) (jetstream.KeyValueEntry, error) {
	var e jetstream.KeyValueEntry
	err := retry(ctx, func(ctx context.Context) error {
		var err error
		e, err = s.kv.Get(ctx, key)
		return err
	})
	return e, err
}

// create creates key, retrying through transient failures. When a retry
// finds the key holding exactly data, the lost answer was a success.
func (s *Store) create(ctx context.Context, key string, data []byte) (uint64, error) {
	var rev uint64
	tries := 0
	err := retry(ctx, func(ctx context.Context) error {
		tries++
		var err error
		rev, err = s.kv.Create(ctx, key, data)
		if tries > 1 && errors.Is(err, jetstream.ErrKeyExists) {
			if e, gerr := s.kv.Get(ctx, key); gerr == nil && bytes.Equal(e.Value(), data) {
				rev, err = e.Revision(), nil
			}
		}
		return err
	})
	return rev, err
}

// update stores data under key if its revision is still rev, retrying
// through transient failures. When a retry finds the key holding exactly
// data, the lost answer was a success.
func (s *Store) update(ctx context.Context, key string, data []byte, rev uint64) (uint64, error) {
	var nrev uint64
	tries := 0
	err := retry(ctx, func(ctx context.Context) error {
		tries++
		var err error
		nrev, err = s.kv.Update(ctx, key, data, rev)
		if tries > 1 && (errors.Is(err, jetstream.ErrKeyRevisionMismatch) || errors.Is(err, jetstream.ErrKeyExists)) {
			if e, gerr := s.kv.Get(ctx, key); gerr == nil && bytes.Equal(e.Value(), data) {
				nrev, err = e.Revision(), nil
			}
		}
		return err
	})
	return nrev, err
}

// mapErr turns JetStream errors into the jobs sentinel errors.
func mapErr(what string, err error) error {
	switch {
	case err == nil:
		return nil
	case errors.Is(err, jetstream.ErrKeyNotFound), errors.Is(err, jetstream.ErrKeyDeleted):
		return fmt.Errorf("%s: %w", what, jobs.ErrNotFound)
	case errors.Is(err, nats.ErrConnectionClosed):
		return fmt.Errorf("%s: %w", what, jobs.ErrClosed)
	}
	return fmt.Errorf("%s: %w", what, err)
}

// CreateJob implements jobs.Store.
func (s *Store) CreateJob(ctx context.Context, j *jobs.Job) error {
	if err := jobs.CheckID("job", j.ID); err != nil {
		return err
	}
	data, err := json.Marshal(j)
	if err != nil {
		return err
	}
	rev, err := s.create(ctx, jobKey(j.ID), data)
	if errors.Is(err, jetstream.ErrKeyExists) {
		return fmt.Errorf("job %s: %w", j.ID, jobs.ErrExists)
	}
	if err != nil {
		return mapErr("create job "+j.ID, err)
	}
	s.routes.Store(j.ID, route{j.Kind, j.Series})
	c := *j
	s.applyJob(rev, j.ID, &c)
	return nil
}

// getJob reads a record and its revision from the bucket.
func (s *Store) getJob(ctx context.Context, id string) (*jobs.Job, uint64, error) {
	if !jobs.ValidID(id) {
		return nil, 0, fmt.Errorf("job %s: %w", id, jobs.ErrNotFound)
	}
	e, err := s.get(ctx, jobKey(id))
	if err != nil {
		return nil, 0, mapErr("job "+id, err)
	}
	var j jobs.Job
	if err := json.Unmarshal(e.Value(), &j); err != nil {
		return nil, 0, fmt.Errorf("job %s: corrupt record: %w", id, err)
	}
	return &j, e.Revision(), nil
}

// Job implements jobs.Store.
func (s *Store) Job(ctx context.Context, id string) (*jobs.Job, error) {
	j, _, err := s.getJob(ctx, id)
	if err != nil {
		return nil, err
	}
	s.overlay(j)
	return j, nil
}

// finished reports whether the mirror holds job id succeeded or
// canceled: a state no update changes. It is false when the mirror is
// off, does not hold the job, or holds another state.
func (s *Store) finished(id string) bool {
	s.mu.Lock()
	defer s.mu.Unlock()
	e, ok := s.jobs[id]
	return ok && s.stop != nil && (e.j.State == jobs.Succeeded || e.j.State == jobs.Canceled)
}

func (s *Store) overlay(j *jobs.Job) {
	if j.State != jobs.Running {
		return
	}
	s.mu.Lock()
	if p, ok := s.progress[j.ID]; ok {
		j.Progress = p
	}
	s.mu.Unlock()
}

// UpdateJob implements jobs.Store by compare-and-swap. A succeeded record
// is final: an update that would store another success over it (a job
// computed twice after a redelivery) is dropped and the stored record
// returned, so the first answer stays.
//
// The first try starts from the mirror's record and revision when the
// mirror holds the job (see mirrored), with no read of the bucket: the
// swap then succeeds only if no write came after that revision, and
// else the record is read from the bucket and fn applied to it, as
// before. A worker updates each job it runs twice (started, finished),
// and the mirror holds its own last write.
func (s *Store) UpdateJob(ctx context.Context, id string, fn func(*jobs.Job) error) (*jobs.Job, error) {
	for try := 0; ; try++ {
		var j jobs.Job
		rev, ok := uint64(0), false
		if try == 0 {
			rev, ok = s.mirrored(func() (uint64, any, bool) { e, ok := s.jobs[id]; return e.rev, e.j, ok }, &j)
		}
		if !ok {
			r, rv, err := s.getJob(ctx, id)
			if err != nil {
				return nil, err
			}
			j, rev = *r, rv
		}
		was := j.State
		s.overlay(&j)
		if err := fn(&j); err != nil {
			return nil, err
		}
		if j.ID != id {
			return nil, fmt.Errorf("job %s: update changed the id to %s", id, j.ID)
		}
		if was == jobs.Succeeded && j.State == jobs.Succeeded {
			cur, _, err := s.getJob(ctx, id)
			if err != nil {
				return nil, err
			}
			return cur, nil
		}
		data, err := json.Marshal(j)
		if err != nil {
			return nil, err
		}
		nrev, err := s.update(ctx, jobKey(id), data, rev)
		if errors.Is(err, jetstream.ErrKeyRevisionMismatch) || errors.Is(err, jetstream.ErrKeyExists) {
			continue // changed meanwhile: apply fn to the new record
		}
		if err != nil {
			return nil, mapErr("update job "+id, err)
		}
		if j.State != jobs.Running {
			s.mu.Lock()
			delete(s.progress, id)
			s.mu.Unlock()
		}
		c := j
		s.applyJob(nrev, id, &c)
		return &j, nil
	}
}

// mirrored copies into dst the mirror's record that find returns (called
// with s.mu held) and returns its revision; ok is false when the mirror
// is off or does not hold it. The copy goes through JSON, as a record read
// from the bucket would, so that an update changes nothing the mirror
// holds.
func (s *Store) mirrored(find func() (rev uint64, rec any, ok bool), dst any) (rev uint64, ok bool) {
	s.mu.Lock()
	rev, rec, ok := find()
	var data []byte
	if ok && s.stop != nil {
		data, _ = json.Marshal(rec)
	}
	s.mu.Unlock()
	if data == nil || json.Unmarshal(data, dst) != nil {
		return 0, false
	}
	return rev, true
}

// progressMsg is the body of a progress message.
type progressMsg struct {
	ID       string        `json:"id"`
	Progress jobs.Progress `json:"progress"`
}

// SetProgress implements jobs.Store: progress is published on
// <prefix>.progress.<id> and kept in memory by watching processes; it is
// not stored.
func (s *Store) SetProgress(ctx context.Context, id string, p jobs.Progress) error {
	data, _ := json.Marshal(progressMsg{ID: id, Progress: p})
	s.onProgress(id, p)
	if err := s.nc.Publish(s.n.progressSubject(id), data); err != nil {
		return mapErr("progress of job "+id, err)
	}
	return nil
}

// onProgress records progress and tells the watchers of the job and its
// series.
func (s *Store) onProgress(id string, p jobs.Progress) {
	s.mu.Lock()
	defer s.mu.Unlock()
	e, ok := s.jobs[id]
	if !ok || e.j.State != jobs.Running {
		return // not mirrored here (a worker), or no longer running
	}
	s.progress[id] = p
	c := *e.j
	c.Progress = p
	s.publishLocked(&c)
}

// DeleteJob implements jobs.Store.
func (s *Store) DeleteJob(ctx context.Context, id string) error {
	if _, _, err := s.getJob(ctx, id); err != nil {
		return err
	}
	if err := retry(ctx, func(ctx context.Context) error { return s.kv.Delete(ctx, jobKey(id)) }); err != nil {
		return mapErr("delete job "+id, err)
	}
	s.mu.Lock()
	delete(s.jobs, id)
	delete(s.progress, id)
	s.mu.Unlock()
	s.routes.Delete(id)
	return nil
}

// Jobs implements jobs.Store from the mirror.
// It first waits for the mirror to hold every write made before the call;
// if the mirror cannot catch up within a few seconds (its watch is being
// re-established after a node stopped) it reads the records from the
// bucket instead.
func (s *Store) Jobs(ctx context.Context, f jobs.Filter) ([]*jobs.Job, error) {
	if err := s.start(ctx); err != nil {
		return nil, err
	}
	var out []*jobs.Job
	if err := s.sync(ctx); err != nil {
		if ctx.Err() != nil {
			return nil, ctx.Err()
		}
		s.log.Warn("job listing: mirror behind, reading the bucket", "error", err)
		if out, err = s.scan(ctx, f); err != nil {
			return nil, err
		}
	} else {
		pick := f.Picker()
		s.mu.Lock()
		for _, e := range s.jobs {
			pick.Add(e.j)
		}
		s.mu.Unlock()
		out = pick.Jobs()
	}
	s.mu.Lock()
	for i, j := range out {
		c := *j
		if p, ok := s.progress[c.ID]; ok && c.State == jobs.Running {
			c.Progress = p
		}
		out[i] = &c
	}
	s.mu.Unlock()
	return out, nil
}

// syncWait bounds how long a listing waits for the mirror.
const syncWait = 3 * time.Second

// sync waits until the mirror holds every write acknowledged before the
// call: until its watch has delivered the bucket's last revision.
func (s *Store) sync(ctx context.Context) error {
	var last uint64
	err := retry(ctx, func(ctx context.Context) error {
		st, err := s.kv.Status(ctx)
		if err != nil {
			return err
		}
		ks, ok := st.(*jetstream.KeyValueBucketStatus)
		if !ok {
			return errors.New("unexpected key-value status type")
		}
		last = ks.StreamInfo().State.LastSeq
		return nil
	})
	if err != nil {
		return err
	}
	deadline := time.Now().Add(syncWait)
	for {
		s.mu.Lock()
		w := s.watched
		s.mu.Unlock()
		if w >= last {
			return nil
		}
		if time.Now().After(deadline) {
			return fmt.Errorf("mirror at revision %d, bucket at %d", w, last)
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-time.After(2 * time.Millisecond):
		}
	}
}

// scan reads the records matching f from the bucket: the frames of
// f.Series from the series record, or every job.
func (s *Store) scan(ctx context.Context, f jobs.Filter) ([]*jobs.Job, error) {
	var ids []string
	if f.Series != "" {
		sr, _, err := s.getSeries(ctx, f.Series)
		if errors.Is(err, jobs.ErrNotFound) {
			return nil, nil
		}
		if err != nil {
			return nil, err
		}
		ids = sr.Frames
	} else {
		err := retry(ctx, func(ctx context.Context) error {
			ids = ids[:0]
			kl, err := s.kv.ListKeys(ctx)
			if err != nil {
				return err
			}
			for k := range kl.Keys() {
				if id, ok := strings.CutPrefix(k, "job."); ok {
					ids = append(ids, id)
				}
			}
			return nil
		})
		if err != nil && !errors.Is(err, jetstream.ErrNoKeysFound) {
			return nil, fmt.Errorf("list jobs: %w", err)
		}
	}
	pick := f.Picker()
	for _, id := range ids {
		j, _, err := s.getJob(ctx, id)
		if errors.Is(err, jobs.ErrNotFound) {
			continue
		}
		if err != nil {
			return nil, err
		}
		pick.Add(j)
	}
	return pick.Jobs(), nil
}

// Counts implements jobs.Store from the mirror.
func (s *Store) Counts(ctx context.Context) (map[jobs.State]int, error) {
	if err := s.start(ctx); err != nil {
		return nil, err
	}
	counts := map[jobs.State]int{}
	for _, st := range jobs.States() {
		counts[st] = 0
	}
	s.mu.Lock()
	for _, e := range s.jobs {
		counts[e.j.State]++
	}
	s.mu.Unlock()
	return counts, nil
}

// Watch implements jobs.Store from the mirror. The first record is the
// mirror's when it holds the topic (a job or a series), with no read of
// the bucket: the watcher is added under the mirror's lock, so every later
// change reaches it, and a mirror a little behind the bucket sends the
// latest record as soon as it has it. Else the first record is read from
// the bucket (a job created by another process a moment ago). A runner
// watches every job it starts and every frame's series, so these are two
// or three reads a frame fewer, of the bucket's leader.
func (s *Store) Watch(ctx context.Context, topic string) (<-chan *jobs.Job, error) {
	if err := s.start(ctx); err != nil {
		return nil, err
	}
	s.mu.Lock()
	if e, ok := s.jobs[topic]; ok {
		c := *e.j
		if p, ok := s.progress[topic]; ok && c.State == jobs.Running {
			c.Progress = p
		}
		ch, err := s.watchers.Add(ctx, topic, &c)
		s.mu.Unlock()
		return ch, err
	}
	if _, ok := s.series[topic]; ok {
		ch, err := s.watchers.Add(ctx, topic, nil)
		s.mu.Unlock()
		return ch, err
	}
	s.mu.Unlock()
	var first *jobs.Job
	if j, err := s.Job(ctx, topic); err == nil {
		first = j
	} else if !errors.Is(err, jobs.ErrNotFound) {
		return nil, err
	} else if _, err := s.Series(ctx, topic); err != nil {
		return nil, fmt.Errorf("watch %s: %w", topic, jobs.ErrNotFound)
	}
	return s.watchers.Add(ctx, topic, first)
}

// Close ends the mirror and every watch.
func (s *Store) Close() error {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.closed {
		return nil
	}
	s.closed = true
	if s.stop != nil {
		s.stop()
	}
	s.watchers.Close()
	return nil
}

// Package embedded is the default backend of the Mottle service: job and
// series records in a bbolt database, images and results as files, and an
// in-memory queue that is rebuilt from the records when the service starts,
// so an accepted job survives a crash or a restart.
//
// Layout of the data directory:
//
//	mottle.db     bbolt database: buckets "jobs", "series" and "keys", JSON
//	              records, the append-only audit trail (see Audit), and
//	              "damaged": records found unreadable at open, set aside
//	              with their bytes (see SetAside)
//	blobs/...     one file per blob key, written to a temporary file and renamed
package embedded

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"sort"
	"sync"
	"time"

	bolt "go.etcd.io/bbolt"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

var (
	bucketJobs   = []byte("jobs")
	bucketSeries = []byte("series")
	bucketKeys   = []byte("keys")
	// bucketDamaged holds, under "<bucket>/<id>", the bytes of records that
	// could not be read when the store opened (set aside, never deleted).
	bucketDamaged = []byte("damaged")
)

// Store is a jobs.Store on a bbolt database. Progress is kept in memory
// only (it changes often and is worthless after a crash); everything else is
// committed, and fsynced, before a method returns.
type Store struct {
	db *bolt.DB

	mu       sync.Mutex
	progress map[string]jobs.Progress
	watchers jobs.Watchers
	// aside lists the records set aside as unreadable at open.
	aside []string
}

// OpenStore opens (creating if needed) the bbolt database at path. It fails
// after one second if another process holds the database.
func OpenStore(path string) (*Store, error) {
	db, err := bolt.Open(path, 0o600, &bolt.Options{Timeout: time.Second})
	if err != nil {
		return nil, fmt.Errorf("open job database %s: %w (is another mottle serve using this data directory?)", path, err)
	}
	var aside []string
	err = db.Update(func(tx *bolt.Tx) error {
		for _, b := range [][]byte{bucketJobs, bucketSeries, bucketKeys, bucketAudit, bucketAuditIndex, bucketDamaged} {
			if _, err := tx.CreateBucketIfNotExists(b); err != nil {
				return err
			}
		}
		var err error
		aside, err = setAside(tx)
		return err
	})
	if err != nil {
		db.Close()
		return nil, fmt.Errorf("initialise job database %s: %w", path, err)
	}
	return &Store{db: db, progress: map[string]jobs.Progress{}, aside: aside}, nil
}

// setAside moves every job, series and key record that does not decode
// into the damaged bucket (a disk error or a hand edit outside Mottle), so
// that one unreadable record cannot make every list fail, and says what
// it moved. Nothing is deleted: the bytes stay under "<bucket>/<id>".
func setAside(tx *bolt.Tx) ([]string, error) {
	kinds := []struct {
		bucket []byte
		what   string
		decode func([]byte) error
	}{
		{bucketJobs, "job", func(v []byte) error { var j jobs.Job; return json.Unmarshal(v, &j) }},
		{bucketSeries, "series", func(v []byte) error { var sr jobs.Series; return json.Unmarshal(v, &sr) }},
		{bucketKeys, "idempotency key", func(v []byte) error { var k jobs.Key; return json.Unmarshal(v, &k) }},
	}
	damaged := tx.Bucket(bucketDamaged)
	var aside []string
	for _, k := range kinds {
		b := tx.Bucket(k.bucket)
		var bad [][]byte
		err := b.ForEach(func(id, v []byte) error {
			if err := k.decode(v); err != nil {
				bad = append(bad, id)
				aside = append(aside, fmt.Sprintf("%s %s: record unreadable (%v); set aside as %s/%s in the damaged bucket", k.what, id, err, k.bucket, id))
			}
			return nil
		})
		if err != nil {
			return nil, err
		}
		for _, id := range bad {
			if err := damaged.Put(append(append(append([]byte{}, k.bucket...), '/'), id...), b.Get(id)); err != nil {
				return nil, err
			}
			if err := b.Delete(id); err != nil {
				return nil, err
			}
		}
	}
	return aside, nil
}

// SetAside lists the records that could not be read when the store
// opened and were moved to the damaged bucket, one sentence each.
func (s *Store) SetAside() []string { return s.aside }

// Close closes the database and ends every watch.
func (s *Store) Close() error {
	s.watchers.Close()
	return s.db.Close()
}

func (s *Store) create(bucket []byte, id string, v any) error {
	data, err := json.Marshal(v)
	if err != nil {
		return err
	}
	return s.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucket)
		if b.Get([]byte(id)) != nil {
			return fmt.Errorf("%s %s: %w", bucket, id, jobs.ErrExists)
		}
		return b.Put([]byte(id), data)
	})
}

func (s *Store) get(bucket []byte, id string, v any) error {
	return s.db.View(func(tx *bolt.Tx) error {
		data := tx.Bucket(bucket).Get([]byte(id))
		if data == nil {
			if tx.Bucket(bucketDamaged).Get([]byte(string(bucket)+"/"+id)) != nil {
				return fmt.Errorf("%s %s: its record was unreadable when the service started and was set aside: %w", bucket, id, jobs.ErrNotFound)
			}
			return fmt.Errorf("%s %s: %w", bucket, id, jobs.ErrNotFound)
		}
		return json.Unmarshal(data, v)
	})
}

func (s *Store) del(bucket []byte, id string) error {
	return s.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucket)
		if b.Get([]byte(id)) == nil {
			return fmt.Errorf("%s %s: %w", bucket, id, jobs.ErrNotFound)
		}
		return b.Delete([]byte(id))
	})
}

// CreateJob implements jobs.Store.
func (s *Store) CreateJob(ctx context.Context, j *jobs.Job) error {
	if err := jobs.CheckID("job", j.ID); err != nil {
		return err
	}
	if err := s.create(bucketJobs, j.ID, j); err != nil {
		return err
	}
	s.publish(j)
	return nil
}

// Job implements jobs.Store.
func (s *Store) Job(ctx context.Context, id string) (*jobs.Job, error) {
	var j jobs.Job
	if err := s.get(bucketJobs, id, &j); err != nil {
		return nil, err
	}
	s.overlay(&j)
	return &j, nil
}

// overlay adds the in-memory progress of a running job.
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

// UpdateJob implements jobs.Store.
func (s *Store) UpdateJob(ctx context.Context, id string, fn func(*jobs.Job) error) (*jobs.Job, error) {
	var j jobs.Job
	err := s.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketJobs)
		data := b.Get([]byte(id))
		if data == nil {
			return fmt.Errorf("job %s: %w", id, jobs.ErrNotFound)
		}
		if err := json.Unmarshal(data, &j); err != nil {
			return fmt.Errorf("job %s: corrupt record: %w", id, err)
		}
		s.overlay(&j)
		if err := fn(&j); err != nil {
			return err
		}
		if j.ID != id {
			return fmt.Errorf("job %s: update changed the id to %s", id, j.ID)
		}
		out, err := json.Marshal(&j)
		if err != nil {
			return err
		}
		return b.Put([]byte(id), out)
	})
	if err != nil {
		return nil, err
	}
	if j.State != jobs.Running {
		s.mu.Lock()
		delete(s.progress, id)
		s.mu.Unlock()
	}
	s.publish(&j)
	return &j, nil
}

// SetProgress implements jobs.Store; progress is kept in memory.
func (s *Store) SetProgress(ctx context.Context, id string, p jobs.Progress) error {
	var j jobs.Job
	if err := s.get(bucketJobs, id, &j); err != nil {
		return err
	}
	if j.State != jobs.Running {
		return nil
	}
	s.mu.Lock()
	s.progress[id] = p
	s.mu.Unlock()
	j.Progress = p
	s.publish(&j)
	return nil
}

// DeleteJob implements jobs.Store.
func (s *Store) DeleteJob(ctx context.Context, id string) error {
	if err := s.del(bucketJobs, id); err != nil {
		return err
	}
	s.mu.Lock()
	delete(s.progress, id)
	s.mu.Unlock()
	return nil
}

// Jobs implements jobs.Store.
func (s *Store) Jobs(ctx context.Context, f jobs.Filter) ([]*jobs.Job, error) {
	pick := f.Picker()
	err := s.db.View(func(tx *bolt.Tx) error {
		return tx.Bucket(bucketJobs).ForEach(func(k, v []byte) error {
			var j jobs.Job
			if err := json.Unmarshal(v, &j); err != nil {
				return fmt.Errorf("job %s: corrupt record: %w", k, err)
			}
			pick.Add(&j)
			return nil
		})
	})
	if err != nil {
		return nil, err
	}
	out := pick.Jobs()
	for _, j := range out {
		s.overlay(j)
	}
	return out, nil
}

// Counts implements jobs.Store.
func (s *Store) Counts(ctx context.Context) (map[jobs.State]int, error) {
	counts := map[jobs.State]int{}
	for _, st := range jobs.States() {
		counts[st] = 0
	}
	err := s.db.View(func(tx *bolt.Tx) error {
		return tx.Bucket(bucketJobs).ForEach(func(k, v []byte) error {
			var j struct {
				State jobs.State `json:"state"`
			}
			if err := json.Unmarshal(v, &j); err != nil {
				return fmt.Errorf("job %s: corrupt record: %w", k, err)
			}
			counts[j.State]++
			return nil
		})
	})
	return counts, err
}

// CreateSeries implements jobs.Store.
func (s *Store) CreateSeries(ctx context.Context, sr *jobs.Series) error {
	if err := jobs.CheckID("series", sr.ID); err != nil {
		return err
	}
	return s.create(bucketSeries, sr.ID, sr)
}

// Series implements jobs.Store.
func (s *Store) Series(ctx context.Context, id string) (*jobs.Series, error) {
	var sr jobs.Series
	if err := s.get(bucketSeries, id, &sr); err != nil {
		return nil, err
	}
	return &sr, nil
}

// UpdateSeries implements jobs.Store.
func (s *Store) UpdateSeries(ctx context.Context, id string, fn func(*jobs.Series) error) (*jobs.Series, error) {
	var sr jobs.Series
	err := s.db.Update(func(tx *bolt.Tx) error {
		b := tx.Bucket(bucketSeries)
		data := b.Get([]byte(id))
		if data == nil {
			return fmt.Errorf("series %s: %w", id, jobs.ErrNotFound)
		}
		if err := json.Unmarshal(data, &sr); err != nil {
			return fmt.Errorf("series %s: corrupt record: %w", id, err)
		}
		if err := fn(&sr); err != nil {
			return err
		}
		if sr.ID != id {
			return fmt.Errorf("series %s: update changed the id to %s", id, sr.ID)
		}
		out, err := json.Marshal(&sr)
		if err != nil {
			return err
		}
		return b.Put([]byte(id), out)
	})
	if err != nil {
		return nil, err
	}
	return &sr, nil
}

// DeleteSeries implements jobs.Store.
func (s *Store) DeleteSeries(ctx context.Context, id string) error {
	return s.del(bucketSeries, id)
}

// AllSeries implements jobs.Store.
func (s *Store) AllSeries(ctx context.Context) ([]*jobs.Series, error) {
	var out []*jobs.Series
	err := s.db.View(func(tx *bolt.Tx) error {
		return tx.Bucket(bucketSeries).ForEach(func(k, v []byte) error {
			var sr jobs.Series
			if err := json.Unmarshal(v, &sr); err != nil {
				return fmt.Errorf("series %s: corrupt record: %w", k, err)
			}
			out = append(out, &sr)
			return nil
		})
	})
	sort.SliceStable(out, func(a, b int) bool { return out[a].Created.Before(out[b].Created) })
	return out, err
}

// CreateKey implements jobs.Store.
func (s *Store) CreateKey(ctx context.Context, k *jobs.Key) error {
	if !jobs.ValidKeyID(k.ID) {
		return fmt.Errorf("idempotency key record %q: %w", k.ID, jobs.ErrNotFound)
	}
	return s.create(bucketKeys, k.ID, k)
}

// Key implements jobs.Store.
func (s *Store) Key(ctx context.Context, id string) (*jobs.Key, error) {
	var k jobs.Key
	if err := s.get(bucketKeys, id, &k); err != nil {
		return nil, err
	}
	return &k, nil
}

// PutKey implements jobs.Store.
func (s *Store) PutKey(ctx context.Context, k *jobs.Key) error {
	data, err := json.Marshal(k)
	if err != nil {
		return err
	}
	return s.db.Update(func(tx *bolt.Tx) error { return tx.Bucket(bucketKeys).Put([]byte(k.ID), data) })
}

// DeleteKey implements jobs.Store.
func (s *Store) DeleteKey(ctx context.Context, id string) error {
	return s.db.Update(func(tx *bolt.Tx) error { return tx.Bucket(bucketKeys).Delete([]byte(id)) })
}

// Watch implements jobs.Store.
func (s *Store) Watch(ctx context.Context, topic string) (<-chan *jobs.Job, error) {
	return s.watchers.AddCurrent(ctx, topic, func() (*jobs.Job, error) {
		if j, err := s.Job(ctx, topic); err == nil {
			return j, nil
		} else if !errors.Is(err, jobs.ErrNotFound) {
			return nil, err
		} else if _, err := s.Series(ctx, topic); err != nil {
			return nil, fmt.Errorf("watch %s: %w", topic, jobs.ErrNotFound)
		}
		return nil, nil
	})
}

// publish sends a copy of j to the watchers of its id and of its series.
func (s *Store) publish(j *jobs.Job) { s.watchers.Publish(j) }

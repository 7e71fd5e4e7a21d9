package natsjs

import (
	"context"
	"encoding/json"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// start starts the mirror once and waits until it holds every record.
func (s *Store) start(ctx context.Context) error {
	s.startOnce.Do(func() {
		wctx, stop := context.WithCancel(context.Background())
		s.mu.Lock()
		if s.closed {
			s.mu.Unlock()
			stop()
			s.startErr = jobs.ErrClosed
			close(s.ready)
			return
		}
		s.stop = stop
		s.mu.Unlock()
		psub, err := s.nc.Subscribe(s.n.prefix+".progress.*", func(m *nats.Msg) {
			var pm progressMsg
			if json.Unmarshal(m.Data, &pm) == nil && jobs.ValidID(pm.ID) {
				s.onProgress(pm.ID, pm.Progress)
			}
		})
		if err != nil {
			stop()
			s.startErr = mapErr("subscribe to progress", err)
			close(s.ready)
			return
		}
		go func() {
			<-wctx.Done()
			psub.Unsubscribe()
		}()
		go s.mirror(wctx)
	})
	select {
	case <-s.ready:
		return s.startErr
	case <-ctx.Done():
		return ctx.Err()
	}
}

// mirror keeps s.jobs and s.series in step with the bucket, restarting
// the watch when it breaks (a node stopped, a reconnection).
func (s *Store) mirror(ctx context.Context) {
	readyOnce := sync.Once{}
	markReady := func() { readyOnce.Do(func() { close(s.ready) }) }
	for ctx.Err() == nil {
		w, err := s.kv.WatchAll(ctx)
		if err != nil {
			s.log.Warn("watch job records", "error", err)
			select {
			case <-ctx.Done():
				return
			case <-time.After(500 * time.Millisecond):
			}
			continue
		}
		seen := map[string]bool{}
		initial := true
	loop:
		for {
			select {
			case <-ctx.Done():
				w.Stop()
				return
			case e, ok := <-w.Updates():
				if !ok {
					break loop
				}
				if e == nil {
					if initial {
						s.dropUnseen(seen)
						initial = false
						markReady()
					}
					continue
				}
				if initial {
					seen[e.Key()] = true
				}
				s.applyEntry(e)
			}
		}
		w.Stop()
	}
}

// dropUnseen removes records that vanished while the watch was down.
func (s *Store) dropUnseen(seen map[string]bool) {
	s.mu.Lock()
	defer s.mu.Unlock()
	for id := range s.jobs {
		if !seen[jobKey(id)] {
			delete(s.jobs, id)
		}
	}
	for id := range s.series {
		if !seen[seriesKey(id)] {
			delete(s.series, id)
		}
	}
}

func (s *Store) applyEntry(e jetstream.KeyValueEntry) {
	s.mu.Lock()
	s.watched = max(s.watched, e.Revision())
	s.mu.Unlock()
	key := e.Key()
	del := e.Operation() != jetstream.KeyValuePut
	switch {
	case strings.HasPrefix(key, "job."):
		id := key[len("job."):]
		if del {
			s.mu.Lock()
			if cur, ok := s.jobs[id]; ok && cur.rev < e.Revision() {
				delete(s.jobs, id)
				delete(s.progress, id)
			}
			s.mu.Unlock()
			return
		}
		var j jobs.Job
		if json.Unmarshal(e.Value(), &j) != nil {
			s.log.Warn("corrupt job record", "key", key)
			return
		}
		s.applyJob(e.Revision(), id, &j)
	case strings.HasPrefix(key, "series."):
		id := key[len("series."):]
		if del {
			s.mu.Lock()
			if cur, ok := s.series[id]; ok && cur.rev < e.Revision() {
				delete(s.series, id)
			}
			s.mu.Unlock()
			return
		}
		var sr jobs.Series
		if json.Unmarshal(e.Value(), &sr) != nil {
			s.log.Warn("corrupt series record", "key", key)
			return
		}
		s.applySeries(e.Revision(), id, &sr)
	}
}

// applyJob stores j (owned by the mirror from now on) when rev is newer
// than what the mirror holds, and tells the watchers.
func (s *Store) applyJob(rev uint64, id string, j *jobs.Job) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.stop == nil {
		return // no mirror in this process
	}
	if cur, ok := s.jobs[id]; ok && cur.rev >= rev {
		return
	}
	s.jobs[id] = jobEntry{rev, j}
	if j.State != jobs.Running {
		delete(s.progress, id)
	}
	c := *j
	if p, ok := s.progress[id]; ok && c.State == jobs.Running {
		c.Progress = p
	}
	s.publishLocked(&c)
}

func (s *Store) applySeries(rev uint64, id string, sr *jobs.Series) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.stop == nil {
		return
	}
	if cur, ok := s.series[id]; ok && cur.rev >= rev {
		return
	}
	s.series[id] = seriesEntry{rev, sr}
}

// publishLocked sends a copy of j to the watchers of its id and its
// series (called with s.mu held, which orders the updates).
func (s *Store) publishLocked(j *jobs.Job) { s.watchers.Publish(j) }

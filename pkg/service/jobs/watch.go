package jobs

import (
	"context"
	"sync"
)

// Watchers is the registry of Store.Watch subscribers, shared by the
// backends: a watcher of a topic (a job id or a series id) receives every
// change published for it, and a watcher that reads slowly loses its
// oldest updates, never the latest. The zero value is ready to use.
type Watchers struct {
	mu     sync.Mutex
	subs   map[string]map[chan *Job]struct{}
	closed bool
}

// Add registers a watcher of topic whose channel first receives first (when
// not nil), then every published change, and is closed when ctx ends or
// Close is called. It returns ErrClosed after Close.
func (w *Watchers) Add(ctx context.Context, topic string, first *Job) (<-chan *Job, error) {
	return w.AddCurrent(ctx, topic, func() (*Job, error) { return first, nil })
}

// AddCurrent is Add with the first record read by current while no change
// is published: a change stored before the read is in the record read, and
// one published after it reaches the watcher, so none falls between the
// two (as one would between a read and Add). current's error is returned,
// and no watcher added.
func (w *Watchers) AddCurrent(ctx context.Context, topic string, current func() (*Job, error)) (<-chan *Job, error) {
	ch := make(chan *Job, 16)
	w.mu.Lock()
	if w.closed {
		w.mu.Unlock()
		return nil, ErrClosed
	}
	first, err := current()
	if err != nil {
		w.mu.Unlock()
		return nil, err
	}
	if w.subs == nil {
		w.subs = map[string]map[chan *Job]struct{}{}
	}
	if w.subs[topic] == nil {
		w.subs[topic] = map[chan *Job]struct{}{}
	}
	w.subs[topic][ch] = struct{}{}
	if first != nil {
		ch <- first
	}
	w.mu.Unlock()
	go func() {
		<-ctx.Done()
		w.mu.Lock()
		defer w.mu.Unlock()
		if _, ok := w.subs[topic][ch]; ok {
			delete(w.subs[topic], ch)
			if len(w.subs[topic]) == 0 {
				delete(w.subs, topic)
			}
			close(ch)
		}
	}()
	return ch, nil
}

// Publish sends a copy of j to the watchers of its id and of its series.
// A full channel drops its oldest record so that the latest arrives.
func (w *Watchers) Publish(j *Job) {
	w.mu.Lock()
	defer w.mu.Unlock()
	for _, topic := range []string{j.ID, j.Series} {
		if topic == "" {
			continue
		}
		for ch := range w.subs[topic] {
			c := *j
			for {
				select {
				case ch <- &c:
				default:
					select {
					case <-ch:
					default:
					}
					continue
				}
				break
			}
		}
	}
}

// Close closes every watcher's channel; later Add calls fail.
func (w *Watchers) Close() {
	w.mu.Lock()
	defer w.mu.Unlock()
	w.closed = true
	for topic, set := range w.subs {
		for ch := range set {
			close(ch)
		}
		delete(w.subs, topic)
	}
}

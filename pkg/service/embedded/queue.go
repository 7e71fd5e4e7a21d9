package embedded

import (
	"context"
	"sync"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// Queue is an in-memory, bounded jobs.Queue. It is not durable by itself:
// the records in the Store are, and Backend.Recover rebuilds the queue from
// them on start.
type Queue struct {
	mu   sync.Mutex
	ids  []string
	cap  int
	wake chan struct{}
}

// NewQueue returns a queue that accepts up to capacity waiting ids.
func NewQueue(capacity int) *Queue {
	if capacity < 1 {
		capacity = 1
	}
	return &Queue{cap: capacity, wake: make(chan struct{}, 1)}
}

// Enqueue implements jobs.Queue.
func (q *Queue) Enqueue(ctx context.Context, id string) error {
	q.mu.Lock()
	if len(q.ids) >= q.cap {
		q.mu.Unlock()
		return jobs.ErrQueueFull
	}
	q.ids = append(q.ids, id)
	q.mu.Unlock()
	q.signal()
	return nil
}

// push adds id regardless of the capacity (recovery and Nak: those jobs
// were accepted already).
func (q *Queue) push(id string) {
	q.mu.Lock()
	q.ids = append(q.ids, id)
	q.mu.Unlock()
	q.signal()
}

func (q *Queue) signal() {
	select {
	case q.wake <- struct{}{}:
	default:
	}
}

// Dequeue implements jobs.Queue.
func (q *Queue) Dequeue(ctx context.Context) (jobs.Delivery, error) {
	for {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		q.mu.Lock()
		if len(q.ids) > 0 {
			id := q.ids[0]
			q.ids[0] = ""
			q.ids = q.ids[1:]
			more := len(q.ids) > 0
			q.mu.Unlock()
			if more {
				q.signal()
			}
			return &delivery{q: q, id: id}, nil
		}
		q.mu.Unlock()
		select {
		case <-ctx.Done():
			return nil, ctx.Err()
		case <-q.wake:
		}
	}
}

// Len implements jobs.Queue.
func (q *Queue) Len() int {
	q.mu.Lock()
	defer q.mu.Unlock()
	return len(q.ids)
}

// Cap implements jobs.Queue.
func (q *Queue) Cap() int { return q.cap }

type delivery struct {
	q  *Queue
	id string
}

func (d *delivery) ID() string        { return d.id }
func (d *delivery) Ack() error        { return nil }
func (d *delivery) Nak() error        { d.q.push(d.id); return nil }
func (d *delivery) InProgress() error { return nil }

package jobs

import (
	"context"
	"io"
	"sort"
	"time"
)

// Store keeps job and series records. Every method is safe for concurrent
// use. Updates are atomic read-modify-write: a key-value backend implements
// them with compare-and-swap on the record's revision and retries.
type Store interface {
	// CreateJob stores a new job; ErrExists if the id is taken.
	CreateJob(ctx context.Context, j *Job) error
	// Job returns the job with that id, or ErrNotFound.
	Job(ctx context.Context, id string) (*Job, error)
	// UpdateJob applies fn to the current record and stores the result
	// atomically; if fn returns an error nothing is stored and that error is
	// returned. It returns the stored record. ErrNotFound if absent.
	UpdateJob(ctx context.Context, id string, fn func(*Job) error) (*Job, error)
	// SetProgress records the progress of a running job. It may be kept
	// only in memory or written lazily: progress is advisory and may be
	// lost on a crash. Watchers of the job see it.
	SetProgress(ctx context.Context, id string, p Progress) error
	// DeleteJob removes the record; ErrNotFound if absent.
	DeleteJob(ctx context.Context, id string) error
	// Jobs returns the records that match f, oldest first.
	Jobs(ctx context.Context, f Filter) ([]*Job, error)
	// Counts returns the number of jobs in each state.
	Counts(ctx context.Context) (map[State]int, error)

	// CreateSeries stores a new series; ErrExists if the id is taken.
	CreateSeries(ctx context.Context, s *Series) error
	// Series returns the series with that id, or ErrNotFound.
	Series(ctx context.Context, id string) (*Series, error)
	// UpdateSeries is the series counterpart of UpdateJob.
	UpdateSeries(ctx context.Context, id string, fn func(*Series) error) (*Series, error)
	// DeleteSeries removes the series record (not its frame jobs).
	DeleteSeries(ctx context.Context, id string) error
	// AllSeries returns every series, oldest first.
	AllSeries(ctx context.Context) ([]*Series, error)

	// CreateKey stores a new idempotency key record; ErrExists if one
	// with that id exists.
	CreateKey(ctx context.Context, k *Key) error
	// Key returns the idempotency key record with that id, or ErrNotFound.
	Key(ctx context.Context, id string) (*Key, error)
	// PutKey replaces an idempotency key record.
	PutKey(ctx context.Context, k *Key) error
	// DeleteKey removes an idempotency key record; deleting a missing one
	// is not an error.
	DeleteKey(ctx context.Context, id string) error

	// Watch sends the record of job id each time it changes, starting with
	// the current one; for topic a series id it sends every change of that
	// series' frame jobs. The channel is closed when ctx is done. Slow
	// receivers may miss intermediate records but always get the latest.
	Watch(ctx context.Context, topic string) (<-chan *Job, error)

	// Close releases the store.
	Close() error
}

// Filter selects jobs in Store.Jobs. Zero fields match everything.
type Filter struct {
	Kind   Kind
	States []State
	Series string
	// FinishedBefore selects terminal jobs that finished before this time.
	FinishedBefore time.Time
	// Limit caps the number returned (0 = no cap): the oldest Limit
	// matches, or the newest with Newest.
	Limit int
	// Newest makes Limit keep the newest matches instead of the oldest.
	// The list is still sorted oldest first.
	Newest bool
	// Keep, if not nil, is one more test a job must pass, applied before
	// Limit (for example the caller's read access to the job's project).
	Keep func(*Job) bool
}

// Match reports whether j passes the filter.
func (f Filter) Match(j *Job) bool {
	if f.Kind != "" && j.Kind != f.Kind {
		return false
	}
	if f.Series != "" && j.Series != f.Series {
		return false
	}
	if len(f.States) > 0 {
		ok := false
		for _, s := range f.States {
			ok = ok || j.State == s
		}
		if !ok {
			return false
		}
	}
	if !f.FinishedBefore.IsZero() && (j.Finished == nil || !j.Finished.Before(f.FinishedBefore)) {
		return false
	}
	return f.Keep == nil || f.Keep(j)
}

// A Picker collects the jobs a Filter selects from a store's records read
// one by one. With a Limit it holds at most twice Limit of them at any
// time, so a listing's memory does not grow with the number of stored
// jobs.
type Picker struct {
	f   Filter
	out []*Job
}

// Picker returns an empty Picker for f.
func (f Filter) Picker() *Picker { return &Picker{f: f} }

// Add keeps j if it passes the filter and reports whether it did. The
// Picker keeps j itself, not a copy.
func (p *Picker) Add(j *Job) bool {
	if !p.f.Match(j) {
		return false
	}
	p.out = append(p.out, j)
	if p.f.Limit > 0 && len(p.out) >= 2*p.f.Limit {
		p.trim()
	}
	return true
}

// Jobs returns the jobs kept, oldest first (by Created, then ID), at most
// Limit of them.
func (p *Picker) Jobs() []*Job {
	p.trim()
	return p.out
}

// trim sorts the jobs kept and drops those beyond Limit.
func (p *Picker) trim() {
	sort.SliceStable(p.out, func(a, b int) bool { return Older(p.out[a], p.out[b]) })
	if n := p.f.Limit; n > 0 && len(p.out) > n {
		if p.f.Newest {
			p.out = append(p.out[:0], p.out[len(p.out)-n:]...)
		} else {
			p.out = p.out[:n]
		}
	}
}

// Older reports whether a was created before b (by ID when created at the
// same time): the order of job listings.
func Older(a, b *Job) bool {
	if !a.Created.Equal(b.Created) {
		return a.Created.Before(b.Created)
	}
	return a.ID < b.ID
}

// Blobs keeps images and result files under slash-separated keys (see
// InputKey, ResultKey, SeriesKey). Put is atomic: a reader sees either the
// old contents or the whole new contents, never a part. Every method is
// safe for concurrent use.
type Blobs interface {
	// Put stores the contents of r under key, replacing any old contents.
	Put(ctx context.Context, key string, r io.Reader) error
	// Create stores the contents of r under key only while the key holds
	// none: when it does, Create returns ErrExists and leaves them as
	// they are. Of Creates of one key at once, one stores its contents
	// and the others return ErrExists. A key deleted may be created
	// again. Blobs that nothing may replace once a record names them (a
	// series frame's solution, named by the state made from it) are
	// written with Create.
	Create(ctx context.Context, key string, r io.Reader) error
	// Get opens the blob under key; ErrNotFound if absent.
	Get(ctx context.Context, key string) (io.ReadCloser, error)
	// Delete removes every blob whose key is prefix or starts with
	// prefix + "/". Deleting nothing is not an error.
	Delete(ctx context.Context, prefix string) error
}

// KeyDeleter is implemented by Blobs whose Delete of a prefix costs more
// than the removal of one blob: Delete must look for the keys under the
// prefix, which in a distributed store means listing it, at a cost that
// grows with everything stored.
type KeyDeleter interface {
	// DeleteKey removes the blob under key alone, not the keys under
	// key + "/". Deleting nothing is not an error.
	DeleteKey(ctx context.Context, key string) error
}

// DeleteKey removes the blob under key, a key with no blobs under it (a
// file, not a folder, such as a series state): by b's DeleteKey when b has
// one, else by Delete.
func DeleteKey(ctx context.Context, b Blobs, key string) error {
	if d, ok := b.(KeyDeleter); ok {
		return d.DeleteKey(ctx, key)
	}
	return b.Delete(ctx, key)
}

// Queue hands job ids to workers. A delivered id must be acknowledged
// (done, success or failure recorded in the Store) or negatively
// acknowledged (put back for another attempt). An id delivered and never
// acknowledged, because its worker died, is delivered again: by the
// stream's redelivery in a distributed backend, or on restart from the
// records in the embedded one.
type Queue interface {
	// Enqueue adds a job id. It returns ErrQueueFull when the number of
	// waiting ids has reached the capacity; the caller must then not
	// consider the job accepted.
	Enqueue(ctx context.Context, id string) error
	// Dequeue blocks until an id is available or ctx is done.
	Dequeue(ctx context.Context) (Delivery, error)
	// Len is the number of ids waiting (not counting ones being worked on).
	Len() int
	// Cap is the capacity, the largest Len that Enqueue accepts.
	Cap() int
}

// Delivery is one job id handed to a worker.
type Delivery interface {
	// ID is the job id.
	ID() string
	// Ack marks the delivery done: it will not be delivered again.
	Ack() error
	// Nak puts the id back for another delivery (for a job interrupted
	// by shutdown).
	Nak() error
	// InProgress tells the queue the worker is still busy, extending the
	// redelivery deadline of a long job. A backend without deadlines
	// returns nil.
	InProgress() error
}

// Backend bundles the parts of a job model implementation.
type Backend struct {
	Store Store
	Blobs Blobs
	Queue Queue
	// Audit keeps the audit trail.
	Audit Audit
	// Recover, if non-nil, is called once when the service starts, before
	// any worker runs: the embedded backend re-enqueues the jobs its
	// records show as queued or running. It returns the number requeued.
	Recover func(ctx context.Context) (int, error)
	// SetAside lists, one sentence each, the records the backend found
	// unreadable when it opened and moved aside (kept, not deleted), so
	// that the service can report them at start.
	SetAside []string
	// Close releases everything.
	Close func() error
}

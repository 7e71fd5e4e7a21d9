package embedded

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// Open opens the embedded backend in dataDir (created if needed) with a
// queue of the given capacity. Its Recover re-enqueues every job whose
// record is queued or running (a running record means the process that ran
// it stopped before finishing), oldest first.
func Open(dataDir string, queueCap int) (*jobs.Backend, error) {
	return OpenWith(dataDir, Options{QueueCap: queueCap})
}

// Options configure OpenWith.
type Options struct {
	// QueueCap is the queue capacity (at least 1).
	QueueCap int
	// NoSync skips fsync on every write. It is for tests and benchmarks
	// only: a crash may then lose or corrupt accepted jobs.
	NoSync bool
}

// OpenWith is Open with options.
func OpenWith(dataDir string, o Options) (*jobs.Backend, error) {
	queueCap := o.QueueCap
	if err := os.MkdirAll(dataDir, 0o750); err != nil {
		return nil, fmt.Errorf("data directory %s: %w", dataDir, err)
	}
	st, err := OpenStore(filepath.Join(dataDir, "mottle.db"))
	if err != nil {
		return nil, err
	}
	st.db.NoSync = o.NoSync
	bl, err := OpenBlobs(filepath.Join(dataDir, "blobs"))
	if err != nil {
		st.Close()
		return nil, err
	}
	bl.noSync = o.NoSync
	q := NewQueue(queueCap)
	return &jobs.Backend{
		Store:    st,
		Blobs:    bl,
		Queue:    q,
		Audit:    st.Audit(),
		SetAside: st.SetAside(),
		Recover:  func(ctx context.Context) (int, error) { return recoverJobs(ctx, st, q) },
		Close:    st.Close,
	}, nil
}

func recoverJobs(ctx context.Context, st *Store, q *Queue) (int, error) {
	list, err := st.Jobs(ctx, jobs.Filter{States: []jobs.State{jobs.Queued, jobs.Running}})
	if err != nil {
		return 0, fmt.Errorf("recover jobs: %w", err)
	}
	var errs []error
	n := 0
	for _, j := range list {
		if j.State == jobs.Running {
			_, err := st.UpdateJob(ctx, j.ID, func(j *jobs.Job) error {
				j.State = jobs.Queued
				j.Progress = jobs.Progress{}
				return nil
			})
			if err != nil {
				errs = append(errs, err)
				continue
			}
		}
		q.push(j.ID)
		n++
	}
	return n, errors.Join(errs...)
}

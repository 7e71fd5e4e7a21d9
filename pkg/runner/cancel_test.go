package runner

import (
	"context"
	"errors"
	"io"
	"log/slog"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service/embedded"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// TestCancelThroughRecord cancels a running job through a runner that does
// not run it, as a node of a cluster answers the cancel of a job that
// another node's worker computes: the request reaches the worker through
// the job's record (watchCancel), the job's context ends with the cause
// errCanceled, and the job is recorded as canceled. The job is held in
// BeforeCompute until its context ends, so it is certainly running when
// the cancel is asked, however fast the machine; every wait is bounded by
// a minute, far below the package's time limit.
func TestCancelThroughRecord(t *testing.T) {
	be, err := embedded.Open(t.TempDir(), 64)
	if err != nil {
		t.Fatal(err)
	}
	defer be.Close()
	ctx := context.Background()
	quiet := slog.New(slog.NewJSONHandler(io.Discard, nil))
	started := make(chan struct{}, 1)
	ended := make(chan error, 1)
	worker, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: 1, Logger: quiet,
		BeforeCompute: func(ctx context.Context, j jobs.Job) {
			started <- struct{}{}
			select {
			case <-ctx.Done():
				ended <- context.Cause(ctx)
			case <-time.After(time.Minute):
				ended <- errors.New("the job's context did not end within a minute")
			}
		}})
	if err != nil {
		t.Fatal(err)
	}
	other, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: 1, Logger: quiet}) // not started: it only answers
	if err != nil {
		t.Fatal(err)
	}
	id := jobs.NewID()
	if err := be.Store.CreateJob(ctx, &jobs.Job{ID: id, Kind: jobs.Analysis, State: jobs.Queued, Params: []byte(`{"subset": 21, "step": 8}`),
		Width: 64, Height: 64, Created: time.Now().UTC()}); err != nil {
		t.Fatal(err)
	}
	stop, err := worker.Start(ctx) // queues the stored job (Backend.Recover)
	if err != nil {
		t.Fatal(err)
	}
	defer stop()
	select {
	case <-started:
	case <-time.After(time.Minute):
		t.Fatal("the job did not start within a minute")
	}
	j, err := other.Cancel(ctx, id)
	if err != nil {
		t.Fatal(err)
	}
	if j.State != jobs.Running || !j.CancelRequested {
		t.Fatalf("after the cancel the record is %s with cancel_requested %v, want running with the request", j.State, j.CancelRequested)
	}
	select {
	case cause := <-ended:
		if !errors.Is(cause, errCanceled) {
			t.Fatalf("the held job ended with %v, want %v", cause, errCanceled)
		}
	case <-time.After(time.Minute):
		t.Fatal("the cancel asked of the other runner did not reach the job within a minute")
	}
	deadline := time.Now().Add(time.Minute)
	for {
		j, err := be.Store.Job(ctx, id)
		if err != nil {
			t.Fatal(err)
		}
		if j.State.Terminal() {
			if j.State != jobs.Canceled {
				t.Errorf("the job ended %s, want canceled", j.State)
			}
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("the job is still %s a minute after it was canceled", j.State)
		}
		time.Sleep(10 * time.Millisecond)
	}
}

package embedded

import (
	"context"
	"errors"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service/jobs"
	"github.com/mottledic/mottle/pkg/service/jobs/jobstest"
)

func TestBlobKeysCannotEscape(t *testing.T) {
	dir := t.TempDir()
	b, err := OpenBlobs(filepath.Join(dir, "blobs"))
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	for _, key := range []string{"../x", "jobs/../../x", "/etc/passwd", "a//b", "a/.hidden", "", "a/b/", `a\b`, "jobs/%2e%2e"} {
		if err := b.Put(ctx, key, strings.NewReader("x")); err == nil {
			t.Errorf("Put(%q) accepted", key)
		}
		if _, err := b.Get(ctx, key); err == nil || errors.Is(err, jobs.ErrNotFound) {
			t.Errorf("Get(%q) = %v, want an invalid-key error", key, err)
		}
		if err := b.Delete(ctx, key); err == nil {
			t.Errorf("Delete(%q) accepted", key)
		}
	}
	if _, err := os.Stat(filepath.Join(dir, "x")); err == nil {
		t.Error("a file was written outside the blob directory")
	}
	if err := b.Put(ctx, "jobs/a/in/ref", strings.NewReader("hello")); err != nil {
		t.Fatal(err)
	}
	rc, err := b.Get(ctx, "jobs/a/in/ref")
	if err != nil {
		t.Fatal(err)
	}
	got, _ := io.ReadAll(rc)
	rc.Close()
	if string(got) != "hello" {
		t.Errorf("read back %q", got)
	}
	if err := b.Delete(ctx, "jobs/a"); err != nil {
		t.Fatal(err)
	}
	if _, err := b.Get(ctx, "jobs/a/in/ref"); !errors.Is(err, jobs.ErrNotFound) {
		t.Errorf("after Delete: %v, want ErrNotFound", err)
	}
}

func TestStoreUpdateWatchRecover(t *testing.T) {
	dir := t.TempDir()
	be, err := Open(dir, 2)
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	now := time.Now().UTC()
	a := &jobs.Job{ID: jobs.NewID(), Kind: jobs.Analysis, State: jobs.Queued, Created: now}
	b := &jobs.Job{ID: jobs.NewID(), Kind: jobs.Analysis, State: jobs.Queued, Created: now.Add(time.Second)}
	for _, j := range []*jobs.Job{a, b} {
		if err := be.Store.CreateJob(ctx, j); err != nil {
			t.Fatal(err)
		}
	}
	if err := be.Store.CreateJob(ctx, a); !errors.Is(err, jobs.ErrExists) {
		t.Errorf("second create: %v, want ErrExists", err)
	}
	if err := be.Store.CreateJob(ctx, &jobs.Job{ID: "../../etc"}); err == nil {
		t.Error("a forged id was stored")
	}
	wctx, cancel := context.WithCancel(ctx)
	ch, err := be.Store.Watch(wctx, a.ID)
	if err != nil {
		t.Fatal(err)
	}
	if j := <-ch; j.State != jobs.Queued {
		t.Errorf("first watched record %s", j.State)
	}
	if _, err := be.Store.UpdateJob(ctx, a.ID, func(j *jobs.Job) error { j.State = jobs.Running; return nil }); err != nil {
		t.Fatal(err)
	}
	be.Store.SetProgress(ctx, a.ID, jobs.Progress{Done: 3, Total: 10})
	var last *jobs.Job
	for last == nil || last.Progress.Done != 3 {
		last = <-ch
	}
	cancel()
	for range ch { // closed after cancel
	}
	boom := errors.New("boom")
	if _, err := be.Store.UpdateJob(ctx, a.ID, func(j *jobs.Job) error { j.State = jobs.Failed; return boom }); !errors.Is(err, boom) {
		t.Errorf("update error %v", err)
	}
	if j, _ := be.Store.Job(ctx, a.ID); j.State != jobs.Running {
		t.Errorf("failed update was stored: %s", j.State)
	}
	be.Close()

	// Reopen as after a crash: both come back, the running one as queued,
	// oldest first, even beyond the queue capacity of new submissions.
	be, err = Open(dir, 1)
	if err != nil {
		t.Fatal(err)
	}
	defer be.Close()
	n, err := be.Recover(ctx)
	if err != nil || n != 2 {
		t.Fatalf("recovered %d, %v; want 2", n, err)
	}
	if err := be.Queue.Enqueue(ctx, jobs.NewID()); !errors.Is(err, jobs.ErrQueueFull) {
		t.Errorf("enqueue over capacity: %v, want ErrQueueFull", err)
	}
	for _, want := range []string{a.ID, b.ID} {
		d, err := be.Queue.Dequeue(ctx)
		if err != nil || d.ID() != want {
			t.Fatalf("dequeue %v %v, want %s", d, err, want)
		}
	}
	if j, _ := be.Store.Job(ctx, a.ID); j.State != jobs.Queued {
		t.Errorf("recovered running job is %s, want queued", j.State)
	}
	counts, _ := be.Store.Counts(ctx)
	if counts[jobs.Queued] != 2 {
		t.Errorf("counts %v", counts)
	}
}

// TestAudit checks the audit trail's contract, and that it reads back
// the same after the database is closed and opened again.
func TestAudit(t *testing.T) {
	dir := t.TempDir()
	be, err := Open(dir, 4)
	if err != nil {
		t.Fatal(err)
	}
	defer func() { be.Close() }()
	diff, err := jobstest.CheckAudit(context.Background(), be.Audit, func() (jobs.Audit, error) {
		be.Close()
		be, err = Open(dir, 4)
		if err != nil {
			return nil, err
		}
		return be.Audit, nil
	})
	if err != nil || diff != "" {
		t.Fatalf("%s %v", diff, err)
	}
}

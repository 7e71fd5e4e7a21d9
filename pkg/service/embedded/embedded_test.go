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
	bolt "go.etcd.io/bbolt"
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

func TestBlobsCreate(t *testing.T) {
	b, err := OpenBlobs(t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	if diff, err := jobstest.CheckCreate(context.Background(), b, jobs.NewID()); err != nil || diff != "" {
		t.Fatalf("%s %v", diff, err)
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

// TestUnreadableRecordSetAside damages one job record and one series
// record in the database the way a disk error or a hand edit would: on the
// next open both are moved to the damaged bucket (bytes kept), the lists
// work and hold the rest, reading the damaged job says it was set aside,
// and the backend reports both for the service's start log.
func TestUnreadableRecordSetAside(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	be, err := Open(dir, 4)
	if err != nil {
		t.Fatal(err)
	}
	now := time.Now().UTC()
	var ids []string
	for range 3 {
		j := &jobs.Job{ID: jobs.NewID(), Kind: jobs.Analysis, State: jobs.Succeeded, Created: now}
		if err := be.Store.CreateJob(ctx, j); err != nil {
			t.Fatal(err)
		}
		ids = append(ids, j.ID)
	}
	sr := &jobs.Series{ID: jobs.NewID(), Created: now}
	if err := be.Store.CreateSeries(ctx, sr); err != nil {
		t.Fatal(err)
	}
	be.Close()

	garbage := []byte(`{"id": "` + ids[1] + `", "state": `) // cut short
	db, err := bolt.Open(filepath.Join(dir, "mottle.db"), 0o600, &bolt.Options{Timeout: time.Second})
	if err != nil {
		t.Fatal(err)
	}
	err = db.Update(func(tx *bolt.Tx) error {
		if err := tx.Bucket(bucketJobs).Put([]byte(ids[1]), garbage); err != nil {
			return err
		}
		return tx.Bucket(bucketSeries).Put([]byte(sr.ID), []byte("\x00\x01"))
	})
	db.Close()
	if err != nil {
		t.Fatal(err)
	}

	be, err = Open(dir, 4)
	if err != nil {
		t.Fatalf("open with an unreadable record: %v", err)
	}
	defer be.Close()
	if len(be.SetAside) != 2 || !strings.Contains(be.SetAside[0], ids[1]) || !strings.Contains(be.SetAside[1], sr.ID) {
		t.Errorf("SetAside = %q, want the job %s and the series %s", be.SetAside, ids[1], sr.ID)
	}
	list, err := be.Store.Jobs(ctx, jobs.Filter{})
	if err != nil {
		t.Fatalf("list after setting aside: %v", err)
	}
	if len(list) != 2 || list[0].ID == ids[1] || list[1].ID == ids[1] {
		t.Errorf("list holds %d jobs, want the 2 readable ones", len(list))
	}
	if all, err := be.Store.AllSeries(ctx); err != nil || len(all) != 0 {
		t.Errorf("series list: %d, %v; want none and no error", len(all), err)
	}
	if counts, err := be.Store.Counts(ctx); err != nil || counts[jobs.Succeeded] != 2 {
		t.Errorf("counts %v, %v; want 2 succeeded", counts, err)
	}
	_, err = be.Store.Job(ctx, ids[1])
	if !errors.Is(err, jobs.ErrNotFound) || !strings.Contains(err.Error(), "set aside") {
		t.Errorf("reading the damaged job: %v, want not found saying it was set aside", err)
	}
	st := be.Store.(*Store)
	st.db.View(func(tx *bolt.Tx) error {
		if got := tx.Bucket(bucketDamaged).Get([]byte("jobs/" + ids[1])); string(got) != string(garbage) {
			t.Errorf("damaged bucket holds %q, want the record's bytes %q", got, garbage)
		}
		return nil
	})
}

package natsjs

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/mottledic/mottle/pkg/service/jobs"
	"github.com/mottledic/mottle/pkg/service/jobs/jobstest"
)

// runServer starts an in-process single-node JetStream server.
func runServer(t testing.TB) string {
	t.Helper()
	opts := &server.Options{Host: "127.0.0.1", Port: -1, JetStream: true, StoreDir: t.TempDir(), NoLog: true, NoSigs: true}
	s, err := server.NewServer(opts)
	if err != nil {
		t.Fatal(err)
	}
	go s.Start()
	if !s.ReadyForConnections(untilEnd(t)) {
		t.Fatal("nats server not ready")
	}
	t.Cleanup(s.Shutdown)
	return s.ClientURL()
}

func open(t testing.TB, url string, mod func(*Options)) *Backend {
	t.Helper()
	o := Options{Servers: []string{url}, AckWait: 300 * time.Millisecond, Work: true}
	if mod != nil {
		mod(&o)
	}
	b, err := Open(testCtx(t), o)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { b.Close() })
	return b
}

func newJob(kind jobs.Kind, series string, frame int) *jobs.Job {
	return &jobs.Job{ID: jobs.NewID(), Kind: kind, State: jobs.Queued, Series: series, FrameIndex: frame,
		Params: []byte(`{}`), Created: time.Now().UTC()}
}

func TestParseURL(t *testing.T) {
	cases := []struct {
		spec    string
		servers int
		ok      bool
		check   func(Options) bool
	}{
		{"nats://127.0.0.1:4222", 1, true, func(o Options) bool { return o.Prefix == "" && o.Replicas == 0 }},
		{"nats://a:4222,nats://b:4222,c:4222?prefix=lab2&replicas=3&ack_wait=5s&max_deliver=4&queue=9", 3, true,
			func(o Options) bool {
				return o.Prefix == "lab2" && o.Replicas == 3 && o.AckWait == 5*time.Second && o.MaxDeliver == 4 &&
					o.QueueCap == 9 && o.Servers[2] == "nats://c:4222"
			}},
		{"nats://a:4222?compress=true", 1, true, func(o Options) bool { return o.Compress }},
		{"nats://a:4222?compress=0", 1, true, func(o Options) bool { return !o.Compress }},
		{"nats://a:4222?compress=gzip", 1, false, nil},
		{"nats://a:4222?replicas=seven", 1, false, nil},
		{"nats://a:4222?ack_wait=soon", 1, false, nil},
		{"nats://a:4222?color=blue", 1, false, nil},
		{"nats://a:4222?replicas=9", 1, false, nil},
		{"nats://a:4222?max_deliver=1", 1, false, nil},
		{"nats://a:4222?prefix=a.b", 1, false, nil},
		{"http://a:4222", 1, false, nil},
		{"", 0, false, nil},
	}
	for _, c := range cases {
		o, err := ParseURL(c.spec)
		if (err == nil) != c.ok {
			t.Errorf("ParseURL(%q): err = %v, want ok = %v", c.spec, err, c.ok)
			continue
		}
		if len(o.Servers) != c.servers {
			t.Errorf("ParseURL(%q): %d servers, want %d", c.spec, len(o.Servers), c.servers)
		}
		if c.check != nil && !c.check(o) {
			t.Errorf("ParseURL(%q) = %+v", c.spec, o)
		}
	}
}

func TestStore(t *testing.T) {
	url := runServer(t)
	b := open(t, url, nil)
	other := open(t, url, nil) // a second process on the same bucket
	ctx := context.Background()
	st, st2 := b.Store(), other.Store()

	sr := &jobs.Series{ID: jobs.NewID(), Params: []byte(`{}`), Created: time.Now().UTC(), Frames: []string{}}
	if err := st.CreateSeries(ctx, sr); err != nil {
		t.Fatal(err)
	}
	if err := st.CreateSeries(ctx, sr); !errors.Is(err, jobs.ErrExists) {
		t.Fatalf("second CreateSeries: %v, want ErrExists", err)
	}
	a := newJob(jobs.Analysis, "", 0)
	if err := st.CreateJob(ctx, a); err != nil {
		t.Fatal(err)
	}
	if err := st.CreateJob(ctx, a); !errors.Is(err, jobs.ErrExists) {
		t.Fatalf("second CreateJob: %v, want ErrExists", err)
	}
	if _, err := st.Job(ctx, jobs.NewID()); !errors.Is(err, jobs.ErrNotFound) {
		t.Fatalf("Job(unknown): %v, want ErrNotFound", err)
	}
	if _, err := st.Job(ctx, "../../etc"); !errors.Is(err, jobs.ErrNotFound) {
		t.Fatalf("Job(forged): %v, want ErrNotFound", err)
	}

	// Concurrent read-modify-writes from two connections: compare-and-swap
	// must not lose any. The mirrors are on (a listing starts them), so
	// each update's first try starts from a mirror's record, most often
	// behind the other process's last write.
	for _, s := range []*Store{st, st2} {
		if _, err := s.Jobs(ctx, jobs.Filter{}); err != nil {
			t.Fatal(err)
		}
	}
	var wg sync.WaitGroup
	const n = 24
	for i := 0; i < n; i++ {
		wg.Add(1)
		go func(s *Store) {
			defer wg.Done()
			if _, err := s.UpdateJob(ctx, a.ID, func(j *jobs.Job) error { j.Attempts++; return nil }); err != nil {
				t.Error(err)
			}
		}([]*Store{st, st2}[i%2])
	}
	for i := 0; i < 6; i++ {
		f := newJob(jobs.Frame, sr.ID, i)
		wg.Add(1)
		go func() {
			defer wg.Done()
			if _, err := st2.UpdateSeries(ctx, sr.ID, func(s *jobs.Series) error { s.Frames = append(s.Frames, f.ID); return nil }); err != nil {
				t.Error(err)
			}
			if err := st2.CreateJob(ctx, f); err != nil {
				t.Error(err)
			}
		}()
	}
	wg.Wait()
	got, err := st.Job(ctx, a.ID)
	if err != nil || got.Attempts != n {
		t.Fatalf("after %d concurrent updates: attempts %d, err %v", n, got.Attempts, err)
	}
	s2, err := st.Series(ctx, sr.ID)
	if err != nil || len(s2.Frames) != 6 {
		t.Fatalf("series frames %v, err %v; want 6", s2.Frames, err)
	}

	// A failing fn stores nothing.
	boom := errors.New("boom")
	if _, err := st.UpdateJob(ctx, a.ID, func(j *jobs.Job) error { j.Attempts = -1; return boom }); !errors.Is(err, boom) {
		t.Fatalf("UpdateJob with failing fn: %v", err)
	}

	// A succeeded record is final: a second success keeps the first.
	fin := time.Now().UTC()
	first := &jobs.Summary{Points: 10, Valid: 10, Seconds: 1}
	if _, err := st.UpdateJob(ctx, a.ID, func(j *jobs.Job) error {
		j.State, j.Finished, j.Summary = jobs.Succeeded, &fin, first
		return nil
	}); err != nil {
		t.Fatal(err)
	}
	again, err := st2.UpdateJob(ctx, a.ID, func(j *jobs.Job) error {
		j.State, j.Summary = jobs.Succeeded, &jobs.Summary{Points: 10, Valid: 10, Seconds: 7}
		return nil
	})
	if err != nil || again.Summary.Seconds != 1 {
		t.Fatalf("second success: %+v, %v; want the first summary kept", again.Summary, err)
	}

	// Listings come from the mirror, which follows writes of other processes.
	waitFor(t, "the mirror to hold the 6 frames of the series", func() bool {
		list, err := st.Jobs(ctx, jobs.Filter{Series: sr.ID})
		if err != nil {
			t.Fatal(err)
		}
		return len(list) == 6
	})
	counts, err := st.Counts(ctx)
	if err != nil || counts[jobs.Queued] != 6 || counts[jobs.Succeeded] != 1 {
		t.Fatalf("counts %v, %v; want 6 queued, 1 succeeded", counts, err)
	}
	all, err := st2.AllSeries(ctx)
	if err != nil || len(all) != 1 || all[0].ID != sr.ID {
		t.Fatalf("AllSeries = %v, %v", all, err)
	}
	if list, _ := st.Jobs(ctx, jobs.Filter{States: []jobs.State{jobs.Succeeded}, Limit: 5}); len(list) != 1 || list[0].ID != a.ID {
		t.Fatalf("Jobs(succeeded) = %v", list)
	}

	// Watch a series from one process while another updates a frame and
	// publishes its progress.
	wctx, cancel := context.WithCancel(ctx)
	defer cancel()
	ch, err := st.Watch(wctx, sr.ID)
	if err != nil {
		t.Fatal(err)
	}
	fid := s2.Frames[0]
	if _, err := st2.UpdateJob(ctx, fid, func(j *jobs.Job) error { j.State = jobs.Running; return nil }); err != nil {
		t.Fatal(err)
	}
	sawRunning, sawProgress := false, false
	timeout := testCtx(t).Done()
	for !sawProgress {
		select {
		case j := <-ch:
			if j.ID != fid {
				continue
			}
			if j.State == jobs.Running && !sawRunning {
				sawRunning = true
				if err := st2.SetProgress(ctx, fid, jobs.Progress{Done: 3, Total: 9}); err != nil {
					t.Fatal(err)
				}
			}
			if sawRunning && j.Progress.Done == 3 {
				sawProgress = true
			}
		case <-timeout:
			t.Fatalf("watch: running %v, progress %v", sawRunning, sawProgress)
		}
	}
	if j, _ := st.Job(ctx, fid); j.Progress.Done != 3 {
		t.Errorf("Job on the watching process: progress %+v, want 3/9", j.Progress)
	}
	cancel()
	for range ch { // closed when the context ends
	}

	if err := st.DeleteJob(ctx, a.ID); err != nil {
		t.Fatal(err)
	}
	if err := st.DeleteJob(ctx, a.ID); !errors.Is(err, jobs.ErrNotFound) {
		t.Fatalf("second DeleteJob: %v", err)
	}
	if err := st.DeleteSeries(ctx, sr.ID); err != nil {
		t.Fatal(err)
	}
	if _, err := st2.Series(ctx, sr.ID); !errors.Is(err, jobs.ErrNotFound) {
		t.Fatalf("Series after delete: %v", err)
	}
}

func TestBlobs(t *testing.T) {
	b := open(t, runServer(t), nil)
	bl := b.Blobs()
	ctx := context.Background()
	id := jobs.NewID()
	read := func(key string) string {
		t.Helper()
		rc, err := bl.Get(ctx, key)
		if err != nil {
			t.Fatal(err)
		}
		defer rc.Close()
		data, err := io.ReadAll(rc)
		if err != nil {
			t.Fatal(err)
		}
		return string(data)
	}
	in := jobs.InputKey(id, "reference")
	big := strings.Repeat("speckle ", 160000) // several object chunks (maxChunk)
	if err := bl.Put(ctx, in, strings.NewReader(big)); err != nil {
		t.Fatal(err)
	}
	if read(in) != big {
		t.Fatal("input read back differs")
	}
	info1, _ := b.blobs.obj.GetInfo(ctx, in)
	// The same contents again: nothing is written (same object NUID).
	if err := bl.Put(ctx, in, strings.NewReader(big)); err != nil {
		t.Fatal(err)
	}
	if info2, _ := b.blobs.obj.GetInfo(ctx, in); info2.NUID != info1.NUID {
		t.Error("a Put of identical contents rewrote the object")
	}
	// Inputs may be replaced, and the old object's chunks go.
	if err := bl.Put(ctx, in, strings.NewReader("new")); err != nil || read(in) != "new" {
		t.Fatalf("replace input: %v, %q", err, read(in))
	}
	if _, _, err := b.blobs.nextChunk(ctx, "$O."+b.blobs.bucket+".C."+info1.NUID, 1, nil); !errors.Is(err, jetstream.ErrMsgNotFound) {
		t.Errorf("a chunk of the replaced object is still stored (%v)", err)
	}
	// Results are written once: the first answer stays.
	out := jobs.ResultKey(id, "field.json")
	if err := bl.Put(ctx, out, strings.NewReader(`{"a":1}`)); err != nil {
		t.Fatal(err)
	}
	if err := bl.Put(ctx, out, bytes.NewReader([]byte(`{"a":2}`))); err != nil {
		t.Fatal(err)
	}
	if got := read(out); got != `{"a":1}` {
		t.Errorf("result after a second Put = %s, want the first", got)
	}
	if err := bl.Put(ctx, jobs.ResultKey(id, "arrays/u.npy"), strings.NewReader("u")); err != nil {
		t.Fatal(err)
	}
	keys, err := bl.Keys(ctx, jobs.JobKey(id))
	if err != nil || len(keys) != 3 {
		t.Fatalf("keys %v, %v; want 3", keys, err)
	}
	if err := bl.Put(ctx, "../x", strings.NewReader("x")); err == nil {
		t.Error("Put with key ../x: no error")
	}
	if diff, err := jobstest.CheckCreate(ctx, bl, jobs.NewID()); err != nil || diff != "" {
		t.Errorf("Create: %s %v", diff, err)
	}
	if _, err := bl.Get(ctx, jobs.InputKey(jobs.NewID(), "reference")); !errors.Is(err, jobs.ErrNotFound) {
		t.Errorf("Get(missing): %v", err)
	}
	if err := bl.Delete(ctx, jobs.JobKey(id)); err != nil {
		t.Fatal(err)
	}
	if keys, _ := bl.Keys(ctx, ""); len(keys) != 0 {
		t.Errorf("after Delete: %v", keys)
	}
	if err := bl.Delete(ctx, jobs.JobKey(id)); err != nil {
		t.Errorf("Delete of nothing: %v", err)
	}

	// DeleteKey removes one key, not the keys under it, and deleting a
	// missing or deleted key is no error.
	file, under := jobs.SeriesKey(id, "state/000001.json"), jobs.SeriesKey(id, "state/000001.json/x")
	for _, k := range []string{file, under} {
		if err := bl.Put(ctx, k, strings.NewReader(big)); err != nil {
			t.Fatal(err)
		}
	}
	for range 2 {
		if err := jobs.DeleteKey(ctx, bl, file); err != nil {
			t.Fatal(err)
		}
	}
	if _, err := bl.Get(ctx, file); !errors.Is(err, jobs.ErrNotFound) {
		t.Errorf("Get after DeleteKey: %v, want not found", err)
	}
	if keys, _ := bl.Keys(ctx, ""); len(keys) != 1 || keys[0] != under {
		t.Errorf("after DeleteKey: %v, want only %s", keys, under)
	}
	if err := bl.DeleteKey(ctx, jobs.SeriesKey(jobs.NewID(), "state/000001.json")); err != nil {
		t.Errorf("DeleteKey of nothing: %v", err)
	}
	if err := bl.DeleteKey(ctx, "../x"); err == nil {
		t.Error("DeleteKey with key ../x: no error")
	}
}

// dequeue pulls one delivery before ctx ends, or returns nil.
func dequeue(t *testing.T, ctx context.Context, q *Queue) jobs.Delivery {
	t.Helper()
	dl, err := q.Dequeue(ctx)
	if err != nil {
		if ctx.Err() == nil {
			t.Fatal(err)
		}
		return nil
	}
	return dl
}

// mustDequeue waits for a delivery (until testCtx ends).
func mustDequeue(t *testing.T, q *Queue, what string) jobs.Delivery {
	t.Helper()
	d := dequeue(t, testCtx(t), q)
	if d == nil {
		t.Fatalf("no delivery: %s", what)
	}
	return d
}

// heartbeats counts the in-progress acknowledgements ("+WPI") that
// clients send to the server at url.
func heartbeats(t *testing.T, url string) <-chan struct{} {
	t.Helper()
	nc, err := nats.Connect(url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(nc.Close)
	ch := make(chan struct{}, 1024)
	if _, err := nc.Subscribe("$JS.ACK.>", func(m *nats.Msg) {
		if string(m.Data) == "+WPI" {
			ch <- struct{}{}
		}
	}); err != nil {
		t.Fatal(err)
	}
	if err := nc.Flush(); err != nil {
		t.Fatal(err)
	}
	return ch
}

// TestQueueHeartbeatAndRedelivery: a worker's heartbeats keep its job
// past AckWait; when it dies the job goes to another. The test counts the
// heartbeats on the wire instead of sleeping: it waits for four of them
// (one every AckWait/3, so more than AckWait after the delivery) while
// the second worker is asking for a job. The server's redelivery timer is
// wall-clock time, so AckWait is 3 s here: only a heartbeat 2 s late
// could make the job go early.
func TestQueueHeartbeatAndRedelivery(t *testing.T) {
	url := runServer(t)
	beats := heartbeats(t, url)
	slow := func(o *Options) { o.AckWait = 3 * time.Second }
	api := open(t, url, func(o *Options) { o.Work = false })
	w1 := open(t, url, slow)
	w2 := open(t, url, slow)
	ctx := context.Background()
	j := newJob(jobs.Analysis, "", 0)
	if err := api.Store().CreateJob(ctx, j); err != nil {
		t.Fatal(err)
	}
	if err := api.Queue().Enqueue(ctx, j.ID); err != nil {
		t.Fatal(err)
	}
	// A repeated publish of the same id is stored once.
	if err := api.Queue().Enqueue(ctx, j.ID); err != nil {
		t.Fatal(err)
	}
	if n, _ := api.Pending(ctx); n != 1 {
		t.Fatalf("stream holds %d messages after a duplicate enqueue, want 1", n)
	}
	// The API node never takes jobs (its Dequeue only waits for the
	// context to end).
	actx, cancel := context.WithTimeout(ctx, 100*time.Millisecond)
	defer cancel()
	if d := dequeue(t, actx, api.Queue()); d != nil {
		t.Fatal("API node dequeued a job")
	}
	d1 := mustDequeue(t, w1.Queue(), "worker 1")
	if d1.ID() != j.ID {
		t.Fatalf("worker 1 got %s, want %s", d1.ID(), j.ID)
	}
	if _, err := w1.Store().UpdateJob(ctx, j.ID, func(j *jobs.Job) error { j.State = jobs.Running; j.Attempts++; return nil }); err != nil {
		t.Fatal(err)
	}
	// Heartbeats keep the job with worker 1 past AckWait while worker 2
	// asks for a job.
	wctx, stopW2 := context.WithCancel(ctx)
	early := make(chan jobs.Delivery, 1)
	go func() { d, _ := w2.Queue().Dequeue(wctx); early <- d }()
	tctx := testCtx(t)
	for n := 0; n < 4; n++ {
		select {
		case <-beats:
		case d := <-early:
			t.Fatalf("job redelivered to worker 2 (%v) after %d heartbeats of worker 1", d != nil, n)
		case <-tctx.Done():
			t.Fatalf("only %d heartbeats from worker 1", n)
		}
	}
	stopW2()
	if d := <-early; d != nil {
		t.Fatal("job redelivered while its worker was sending heartbeats")
	}
	// Worker 1 dies: no more heartbeats, the job goes to worker 2 with its
	// record back to queued.
	w1.Conn().Close()
	d2 := mustDequeue(t, w2.Queue(), "worker 2 after worker 1 died")
	if d2.ID() != j.ID {
		t.Fatalf("worker 2 got %s after worker 1 died, want %s", d2.ID(), j.ID)
	}
	got, _ := w2.Store().Job(ctx, j.ID)
	if got.State != jobs.Queued || got.Attempts != 1 {
		t.Fatalf("redelivered record: state %s attempts %d, want queued, 1", got.State, got.Attempts)
	}
	if err := d2.Ack(); err != nil {
		t.Fatal(err)
	}
	if n, _ := api.Pending(ctx); n != 0 {
		t.Fatalf("stream holds %d messages after the ack, want 0", n)
	}
	if dl, _ := api.DeadLetters(ctx); len(dl) != 0 {
		t.Fatalf("dead letters %v, want none", dl)
	}
}

func TestQueueDeadLetters(t *testing.T) {
	url := runServer(t)
	mod := func(o *Options) { o.MaxDeliver = 2 }
	w1 := open(t, url, mod)
	w2 := open(t, url, mod)
	ctx := context.Background()

	// A job whose record says failed is dead-lettered with its reason.
	bad := newJob(jobs.Analysis, "", 0)
	w2.Store().CreateJob(ctx, bad)
	w2.Queue().Enqueue(ctx, bad.ID)
	d := mustDequeue(t, w2.Queue(), "the bad job")
	fin := time.Now().UTC()
	w2.Store().UpdateJob(ctx, bad.ID, func(j *jobs.Job) error {
		j.State, j.Finished = jobs.Failed, &fin
		j.Error = &jobs.Failure{Title: "Invalid parameters", Detail: "subset 99 is larger than the image", Field: "params.subset"}
		return nil
	})
	if err := d.Ack(); err != nil {
		t.Fatal(err)
	}
	// A failed stereo job goes under its own kind, not "unknown".
	st := newJob(jobs.Stereo, "", 0)
	w2.Store().CreateJob(ctx, st)
	w2.Queue().Enqueue(ctx, st.ID)
	d = mustDequeue(t, w2.Queue(), "the stereo job")
	fin2 := time.Now().UTC()
	w2.Store().UpdateJob(ctx, st.ID, func(j *jobs.Job) error {
		j.State, j.Finished = jobs.Failed, &fin2
		j.Error = &jobs.Failure{Title: "Invalid input", Detail: "rig: calibrated on 640×480 px images", Field: "rig"}
		return nil
	})
	if err := d.Ack(); err != nil {
		t.Fatal(err)
	}

	// A job whose worker dies on every delivery is failed on the last one.
	j := newJob(jobs.Frame, jobs.NewID(), 3)
	w1.Store().CreateJob(ctx, j)
	w1.Queue().Enqueue(ctx, j.ID)
	mustDequeue(t, w1.Queue(), "the frame")
	w1.Conn().Close()
	// The last delivery is not handed out: worker 2's Dequeue fails the
	// record and dead-letters it. Ask until the record says so.
	wctx, stopW2 := context.WithCancel(ctx)
	handed := make(chan jobs.Delivery, 1)
	go func() { d, _ := w2.Queue().Dequeue(wctx); handed <- d }()
	var got *jobs.Job
	waitFor(t, "the frame to be failed on its last delivery", func() bool {
		got, _ = w2.Store().Job(ctx, j.ID)
		return got != nil && got.State.Terminal()
	})
	stopW2()
	if d := <-handed; d != nil {
		t.Fatalf("delivery %d handed out beyond MaxDeliver", 2)
	}
	if got.State != jobs.Failed || got.Error == nil || !strings.Contains(got.Error.Detail, "delivered 2 times") {
		t.Fatalf("record after the last delivery: %+v %+v", got, got.Error)
	}
	dls, err := w2.DeadLetters(ctx)
	if err != nil || len(dls) != 3 {
		t.Fatalf("dead letters %+v, %v; want 3", dls, err)
	}
	if dls[0].Job != bad.ID || dls[0].Error.Field != "params.subset" || dls[2].Job != j.ID || dls[2].Kind != jobs.Frame || dls[2].Deliveries != 2 {
		t.Errorf("dead letters %+v %+v", dls[0], dls[2])
	}
	for k, kind := range []jobs.Kind{jobs.Analysis, jobs.Stereo, jobs.Frame} {
		if dl := dls[k]; dl.Kind != kind || !strings.HasSuffix(dl.Subject, ".dead."+string(kind)) {
			t.Errorf("dead letter %d: kind %s on subject %q; want %s on <prefix>.dead.%[3]s", k, dl.Kind, dl.Subject, kind)
		}
	}
	if n, _ := w2.Pending(ctx); n != 0 {
		t.Errorf("stream holds %d messages, want 0", n)
	}
}

func TestQueueFull(t *testing.T) {
	b := open(t, runServer(t), func(o *Options) { o.QueueCap = 2; o.Work = false })
	ctx := context.Background()
	for i := 0; i < 3; i++ {
		j := newJob(jobs.Analysis, "", 0)
		b.Store().CreateJob(ctx, j)
		err := b.Queue().Enqueue(ctx, j.ID)
		if want := i == 2; errors.Is(err, jobs.ErrQueueFull) != want {
			t.Fatalf("enqueue %d: %v", i, err)
		}
	}
	// Len is cached for a moment; wait until it is read again.
	waitFor(t, "Len to say 2", func() bool { return b.Queue().Len() == 2 })
}

// TestQueueNak: a job put back is delivered again without using up its
// deliveries, after the jobs queued behind it.
func TestQueueNak(t *testing.T) {
	url := runServer(t)
	w := open(t, url, func(o *Options) { o.MaxDeliver = 2 })
	ctx := context.Background()
	a, b := newJob(jobs.Analysis, "", 0), newJob(jobs.Frame, jobs.NewID(), 0)
	for _, j := range []*jobs.Job{a, b} {
		w.Store().CreateJob(ctx, j)
		if err := w.Queue().Enqueue(ctx, j.ID); err != nil {
			t.Fatal(err)
		}
	}
	var order []string
	for i := 0; i < 6; i++ {
		d := mustDequeue(t, w.Queue(), fmt.Sprintf("delivery %d", i))
		order = append(order, d.ID())
		if err := d.Nak(); err != nil {
			t.Fatal(err)
		}
	}
	for i, id := range order {
		if want := []string{a.ID, b.ID}[i%2]; id != want {
			t.Fatalf("delivery %d was %s, want %s: put-back jobs must go behind the others", i, id[:6], want[:6])
		}
	}
	if got, _ := w.Store().Job(ctx, a.ID); got.State != jobs.Queued {
		t.Fatalf("after 3 put-backs with MaxDeliver 2: state %s, want still queued", got.State)
	}
	if n, _ := w.Pending(ctx); n != 2 {
		t.Fatalf("%d messages in the stream, want 2", n)
	}
}

// runCluster starts three in-process JetStream servers in one cluster.
// The cluster ports are chosen free before the servers listen on them, so
// another process can take one in between (seen once in CI: a server then
// never became ready and the test waited for the package's whole time
// limit). A start that is not ready within clusterReady is therefore shut
// down and tried again on new ports.
func runCluster(t testing.TB) []*server.Server {
	t.Helper()
	const attempts = 4
	for range attempts {
		if srvs := startServers(t); srvs != nil {
			return srvs
		}
	}
	t.Fatalf("nats cluster not ready after %d starts of %s each", attempts, clusterReady)
	return nil
}

// clusterReady bounds the wait for one start of the test cluster; on an
// idle machine the servers listen within milliseconds.
const clusterReady = 30 * time.Second

// startServers starts the three servers once and returns them when all
// listen within clusterReady; otherwise it shuts them down and returns nil.
func startServers(t testing.TB) []*server.Server {
	t.Helper()
	ports := freePorts(t, 3)
	var routes []string
	for _, p := range ports {
		routes = append(routes, fmt.Sprintf("nats://127.0.0.1:%d", p))
	}
	var srvs []*server.Server
	for i, p := range ports {
		opts := &server.Options{ServerName: fmt.Sprintf("s%d", i+1), Host: "127.0.0.1", Port: -1, JetStream: true,
			StoreDir: t.TempDir(), NoLog: true, NoSigs: true,
			Cluster: server.ClusterOpts{Name: "blobs-test", Host: "127.0.0.1", Port: p},
			Routes:  server.RoutesFromStr(strings.Join(routes, ","))}
		s, err := server.NewServer(opts)
		if err != nil {
			t.Fatal(err)
		}
		go s.Start()
		srvs = append(srvs, s)
	}
	deadline := time.Now().Add(clusterReady)
	for _, s := range srvs {
		if !s.ReadyForConnections(time.Until(deadline)) {
			t.Logf("nats cluster on ports %v not ready within %s; starting again", ports, clusterReady)
			for _, s := range srvs {
				s.Shutdown()
			}
			return nil
		}
	}
	for _, s := range srvs {
		t.Cleanup(s.Shutdown)
	}
	return srvs
}

// TestBlobsAfterNodeStops: objects stored on a three-node cluster are
// read back whole after the node the client is connected to, which also
// leads the object stream, stops, and the client reconnects to another.
func TestBlobsAfterNodeStops(t *testing.T) {
	srvs := runCluster(t)
	ctx := context.Background()
	setup := open(t, srvs[0].ClientURL(), nil)
	st, err := setup.js.Stream(ctx, "OBJ_"+setup.n.objects)
	if err != nil {
		t.Fatal(err)
	}
	if r := st.CachedInfo().Config.Replicas; r != 3 {
		t.Fatalf("object stream replicas %d, want 3", r)
	}
	leader := st.CachedInfo().Cluster.Leader
	var lead *server.Server
	for _, s := range srvs {
		if s.Name() == leader {
			lead = s
		}
	}
	if lead == nil {
		t.Fatalf("object stream leader %q is none of the servers", leader)
	}
	// The client knows only the leader; it learns the others from it.
	b := open(t, lead.ClientURL(), nil)
	id := jobs.NewID()
	// Create on a replicated stream (its leader refuses a conditional
	// write with a code of its own).
	if diff, err := jobstest.CheckCreate(ctx, b.Blobs(), jobs.NewID()); err != nil || diff != "" {
		t.Fatalf("Create on three nodes: %s %v", diff, err)
	}
	want := map[string]string{}
	for i := range 4 {
		key := jobs.ResultKey(id, fmt.Sprintf("f%d.json", i))
		want[key] = strings.Repeat(fmt.Sprintf("chunk %d ", i), 50000) // several 128 KiB chunks
		if err := b.Blobs().Put(ctx, key, strings.NewReader(want[key])); err != nil {
			t.Fatal(err)
		}
	}
	lead.Shutdown()
	lead.WaitForShutdown()
	// Wait for the event the reads depend on, a new leader of the object
	// stream, so that the bound below covers only the reads and not the
	// election (whose length depends on the machine).
	waitFor(t, "a new leader of the object stream", func() bool {
		ictx, cancel := context.WithTimeout(ctx, time.Second)
		defer cancel()
		si, err := b.js.Stream(ictx, "OBJ_"+b.n.objects)
		if err != nil {
			return false
		}
		l := si.CachedInfo().Cluster
		return l != nil && l.Leader != "" && l.Leader != leader
	})
	for key, w := range want {
		// Less than one 15 s attempt of the object store's own reader,
		// which stalled here (about one run in two) because the ordered
		// consumer it creates per read was never created.
		rctx, cancel := context.WithTimeout(ctx, 12*time.Second)
		rc, err := b.Blobs().Get(rctx, key)
		cancel()
		if err != nil {
			t.Fatalf("Get %s after %s stopped (client now on %s): %v", key, leader, b.Conn().ConnectedServerName(), err)
		}
		data, _ := io.ReadAll(rc)
		if string(data) != w {
			t.Errorf("Get %s: %d bytes differ from the %d stored", key, len(data), len(w))
		}
	}
	if b.Conn().ConnectedServerName() == leader {
		t.Errorf("client still on the stopped server %s", leader)
	}
	if diff, err := jobstest.CheckCreate(ctx, b.Blobs(), jobs.NewID()); err != nil || diff != "" {
		t.Fatalf("Create after %s stopped: %s %v", leader, diff, err)
	}
}

// TestBlobsPutOverIncomplete checks that Put writes again an object whose
// metadata was stored without all its chunks, as the object store leaves
// one when a chunk's publish acknowledgement fails after the metadata was
// sent (it then purges the chunks). Neither a result key (written once)
// nor an input with the same digest may keep such an object.
//
// The incomplete object is read by another process: the writer's own Get
// would answer from its read cache, with the contents it wrote.
func TestBlobsPutOverIncomplete(t *testing.T) {
	url := runServer(t)
	b := open(t, url, nil)
	bl := b.Blobs()
	reader := open(t, url, nil).Blobs()
	ctx := context.Background()
	big := strings.Repeat("speckle ", 160000) // several object chunks (maxChunk)
	for _, tc := range []struct {
		name  string
		key   string
		data  string
		purge []jetstream.StreamPurgeOpt // applied to the chunk subject
		// create writes with Create: an object without its chunks holds
		// nothing, so Create writes over it.
		create bool
	}{
		{"result, no chunks", jobs.ResultKey(jobs.NewID(), "field.json"), `{"a":1}`, nil, false},
		{"result, last chunk only", jobs.ResultKey(jobs.NewID(), "arrays/u.npy"), big, []jetstream.StreamPurgeOpt{jetstream.WithPurgeKeep(1)}, false},
		{"input, same digest", jobs.InputKey(jobs.NewID(), "reference"), big, nil, false},
		{"created, no chunks", jobs.SeriesKey(jobs.NewID(), "solved/000001.bin"), big, nil, true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			put := bl.Put
			if tc.create {
				put = bl.Create
			}
			if err := put(ctx, tc.key, strings.NewReader(tc.data)); err != nil {
				t.Fatal(err)
			}
			info, err := b.blobs.obj.GetInfo(ctx, tc.key)
			if err != nil {
				t.Fatal(err)
			}
			subject := "$O." + b.blobs.bucket + ".C." + info.NUID
			opts := append([]jetstream.StreamPurgeOpt{jetstream.WithPurgeSubject(subject)}, tc.purge...)
			st, err := b.js.Stream(ctx, b.blobs.stream)
			if err != nil {
				t.Fatal(err)
			}
			if err := st.Purge(ctx, opts...); err != nil {
				t.Fatal(err)
			}
			if _, err := reader.Get(ctx, tc.key); err == nil {
				t.Fatal("Get of an object without all its chunks: no error")
			}
			if err := put(ctx, tc.key, strings.NewReader(tc.data)); err != nil {
				t.Fatal(err)
			}
			rc, err := bl.Get(ctx, tc.key)
			if err != nil {
				t.Fatalf("Get after a second Put: %v", err)
			}
			defer rc.Close()
			got, err := io.ReadAll(rc)
			if err != nil {
				t.Fatal(err)
			}
			if string(got) != tc.data {
				t.Errorf("read back %d bytes, want %d", len(got), len(tc.data))
			}
		})
	}
}

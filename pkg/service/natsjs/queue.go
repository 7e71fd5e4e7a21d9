package natsjs

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// Headers of job and dead-letter messages.
const (
	// HeaderJob carries the job id.
	HeaderJob = "Mottle-Job"
	// HeaderKind carries the job kind ("analysis", "frame" or "stereo").
	HeaderKind = "Mottle-Kind"
	// HeaderReason carries a dead letter's failure reason.
	HeaderReason = "Mottle-Reason"
)

// Queue is a jobs.Queue on a JetStream work-queue stream with one durable
// pull consumer shared by every worker. Each Dequeue pulls one message, so
// an idle worker never holds jobs another could run. A delivered job sends
// a heartbeat (an in-progress acknowledgement) every AckWait/3 until it is
// acknowledged; a worker that dies stops sending them and the job is
// delivered again AckWait later.
type Queue struct {
	b    *Backend
	cons jetstream.Consumer

	mu    sync.Mutex
	lenAt time.Time
	n     int

	// Warnings of repeated failures, at most one per warnEvery each.
	pullWarn, putBackWarn warnLimit
}

// warnEvery is the least time between two warnings of one kind of
// repeated failure (pulling jobs, putting jobs back).
const warnEvery = 10 * time.Second

// warnLimit rate-limits the warnings of one kind of repeated failure:
// the first failure is logged, then at most one per warnEvery with the
// number of failures since the last warning.
type warnLimit struct {
	mu     sync.Mutex
	last   time.Time
	missed int
}

// warn logs msg with err, unless a warning was logged less than
// warnEvery ago.
func (w *warnLimit) warn(log *slog.Logger, msg string, err error, args ...any) {
	w.mu.Lock()
	now := time.Now()
	if !w.last.IsZero() && now.Sub(w.last) < warnEvery {
		w.missed++
		w.mu.Unlock()
		return
	}
	n := w.missed + 1
	w.last, w.missed = now, 0
	w.mu.Unlock()
	log.Warn(msg, append(args, "error", err, "failures", n)...)
}

// DeadLetter is the body of a message on the dead-letter subject
// <prefix>.dead.<kind>: a job that failed, or that was delivered
// Options.MaxDeliver times without finishing.
type DeadLetter struct {
	Job        string        `json:"job"`
	Kind       jobs.Kind     `json:"kind"`
	Series     string        `json:"series,omitempty"`
	Frame      int           `json:"frame,omitempty"`
	Attempts   int           `json:"attempts"`
	Deliveries uint64        `json:"deliveries"`
	Error      *jobs.Failure `json:"error"`
	Time       time.Time     `json:"time"`
	// Subject is the subject the dead letter was stored under (filled
	// in by DeadLetters, not part of the body).
	Subject string `json:"-"`
}

// Enqueue implements jobs.Queue: it publishes the id on the subject of the
// job's kind (and series), with the id as message id so that a repeated
// publish within two minutes is stored once.
func (q *Queue) Enqueue(ctx context.Context, id string) error {
	if !jobs.ValidID(id) {
		return jobs.CheckID("job", id)
	}
	if q.Len() >= q.Cap() {
		return jobs.ErrQueueFull
	}
	st := q.b.store
	var rt route
	if v, ok := st.routes.LoadAndDelete(id); ok {
		rt = v.(route)
	} else {
		j, _, err := st.getJob(ctx, id)
		if err != nil {
			return fmt.Errorf("enqueue: %w", err)
		}
		rt = route{j.Kind, j.Series}
	}
	subj := q.b.n.analysisSubject()
	if rt.kind == jobs.Frame && jobs.ValidID(rt.series) {
		subj = q.b.n.frameSubject(rt.series)
	}
	m := &nats.Msg{Subject: subj, Data: []byte(id), Header: nats.Header{}}
	m.Header.Set(HeaderJob, id)
	m.Header.Set(HeaderKind, string(rt.kind))
	err := retry(ctx, func(ctx context.Context) error {
		_, err := q.b.js.PublishMsg(ctx, m, jetstream.WithMsgID(id))
		if err != nil && strings.Contains(err.Error(), "maximum messages") {
			return jobs.ErrQueueFull
		}
		return err
	})
	if errors.Is(err, jobs.ErrQueueFull) {
		return err
	}
	if err != nil {
		return fmt.Errorf("enqueue job %s on %s: %w", id, subj, err)
	}
	q.mu.Lock()
	q.n++
	q.mu.Unlock()
	return nil
}

// Len implements jobs.Queue: the consumer's count of jobs not yet
// delivered, read from the server at most every 250 ms (the last known
// value if the server does not answer within 2 s).
func (q *Queue) Len() int {
	q.mu.Lock()
	defer q.mu.Unlock()
	if time.Since(q.lenAt) < 250*time.Millisecond {
		return q.n
	}
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
	defer cancel()
	info, err := q.cons.Info(ctx)
	if err == nil {
		q.n = int(info.NumPending)
	}
	q.lenAt = time.Now()
	return q.n
}

// Cap implements jobs.Queue.
func (q *Queue) Cap() int { return q.b.opt.QueueCap }

// Dequeue implements jobs.Queue. In a process without Options.Work it
// blocks until ctx is done.
func (q *Queue) Dequeue(ctx context.Context) (jobs.Delivery, error) {
	o := q.b.opt
	if !o.Work {
		<-ctx.Done()
		return nil, ctx.Err()
	}
	for {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		fctx, cancel := context.WithTimeout(ctx, 5*time.Second)
		msg, err := q.cons.Next(jetstream.FetchContext(fctx))
		cancel()
		if err != nil {
			if ctx.Err() != nil {
				return nil, ctx.Err()
			}
			if !errors.Is(err, context.DeadlineExceeded) && !errors.Is(err, nats.ErrTimeout) && !errors.Is(err, jetstream.ErrNoMessages) {
				// A node stopped or the connection is switching over:
				// wait a little and pull again. A failure that goes on
				// shows in the log, so an idle worker is explained.
				q.pullWarn.warn(o.Logger, "pull jobs: retrying", err, "consumer", q.b.n.consumer, "stream", q.b.n.jobStream)
				select {
				case <-ctx.Done():
					return nil, ctx.Err()
				case <-time.After(250 * time.Millisecond):
				}
			}
			continue
		}
		if d := q.accept(ctx, msg); d != nil {
			return d, nil
		}
	}
}

// accept turns a message into a delivery, or settles it and returns nil:
// a malformed message, a job gone, or a job out of deliveries.
func (q *Queue) accept(ctx context.Context, msg jetstream.Msg) jobs.Delivery {
	o := q.b.opt
	id := string(msg.Data())
	if !jobs.ValidID(id) {
		o.Logger.Warn("job stream: malformed message dropped", "subject", msg.Subject())
		_ = msg.Term()
		return nil
	}
	var delivered uint64 = 1
	if md, err := msg.Metadata(); err == nil {
		delivered = md.NumDelivered
	}
	d := &delivery{q: q, msg: msg, id: id, delivered: delivered, at: time.Now().UTC(), done: make(chan struct{}), every: o.AckWait / 3}
	d.beat.Store(time.Now().UnixNano())
	go d.heartbeat()
	st := q.b.store
	if delivered > 1 {
		// Delivered again: the worker that had it died, lost its
		// connection or missed its heartbeats. A record still saying
		// running is put back to queued so the service starts it again.
		_, err := st.UpdateJob(ctx, id, func(j *jobs.Job) error {
			if j.State != jobs.Running {
				return errUnchanged
			}
			j.State, j.Started, j.Progress = jobs.Queued, nil, jobs.Progress{}
			return nil
		})
		switch {
		case errors.Is(err, jobs.ErrNotFound):
			d.settle(msg.Ack)
			return nil
		case err != nil && !errors.Is(err, errUnchanged):
			o.Logger.Warn("redelivered job: reset record", "job", id, "error", err)
		}
	}
	if delivered >= uint64(o.MaxDeliver) {
		now := time.Now().UTC()
		_, err := st.UpdateJob(ctx, id, func(j *jobs.Job) error {
			if j.State.Terminal() {
				return errUnchanged
			}
			j.State, j.Finished = jobs.Failed, &now
			j.Error = &jobs.Failure{Title: "Too many deliveries", Detail: fmt.Sprintf(
				"the job was delivered %d times to workers without finishing (each worker stopped or lost its connection first); check the worker logs, then submit it again, perhaps with a larger step", delivered)}
			return nil
		})
		if err != nil && !errors.Is(err, errUnchanged) && !errors.Is(err, jobs.ErrNotFound) {
			o.Logger.Warn("job out of deliveries: record failure", "job", id, "error", err)
		}
		_ = d.Ack()
		return nil
	}
	return d
}

var errUnchanged = errors.New("record unchanged")

// delivery is one job message held by a worker.
type delivery struct {
	q         *Queue
	msg       jetstream.Msg
	id        string
	delivered uint64
	// at is when the delivery arrived: a failure recorded before it was
	// dead-lettered by an earlier delivery.
	at   time.Time
	once sync.Once
	done chan struct{}
	// every is the heartbeat interval, and beat when the delivery came or
	// its last heartbeat was sent (Unix nanoseconds).
	every time.Duration
	beat  atomic.Int64
}

func (d *delivery) ID() string { return d.id }

// heartbeat sends in-progress acknowledgements until the delivery is
// settled, one every d.every.
func (d *delivery) heartbeat() {
	t := time.NewTicker(d.every)
	defer t.Stop()
	for {
		select {
		case <-d.done:
			return
		case <-t.C:
			d.beat.Store(time.Now().UnixNano())
			_ = d.msg.InProgress()
		}
	}
}

// settle stops the heartbeat and runs fn once.
func (d *delivery) settle(fn func() error) error {
	err := errors.New("delivery already settled")
	d.once.Do(func() {
		close(d.done)
		err = fn()
	})
	return err
}

// Ack implements jobs.Delivery. A job whose record says failed is
// published on the dead-letter subject with its failure reason first.
// The record is read from the bucket unless this process's mirror holds
// it succeeded or canceled (the worker's own last write, mostly), which no
// later write changes. The acknowledgement waits for the server's
// confirmation.
func (d *delivery) Ack() error {
	return d.settle(func() error {
		ctx, cancel := context.WithTimeout(context.Background(), retryFor)
		defer cancel()
		if !d.q.b.store.finished(d.id) {
			if j, _, err := d.q.b.store.getJob(ctx, d.id); err == nil && j.State == jobs.Failed && (j.Finished == nil || !j.Finished.Before(d.at)) {
				if err := d.q.deadLetter(ctx, j, d.delivered); err != nil {
					d.q.b.opt.Logger.Error("dead letter", "job", d.id, "error", err)
				}
			}
		}
		if err := d.msg.DoubleAck(ctx); err != nil {
			// Not confirmed (a node switching over): the job may be
			// delivered again, and its worker will find it finished.
			return fmt.Errorf("acknowledge job %s: %w", d.id, err)
		}
		return nil
	})
}

// Nak implements jobs.Delivery. The job is published again at the end of
// the queue and this delivery acknowledged, so a job put back (a frame
// waiting for its turn, a job interrupted by shutdown) keeps its delivery
// count at 1 and lets the jobs behind it go first. A crash between the two
// steps leaves two messages for the job; the second finds it started or
// finished and is dropped. If the publish fails the message is negatively
// acknowledged instead.
func (d *delivery) Nak() error {
	return d.settle(func() error {
		ctx, cancel := context.WithTimeout(context.Background(), retryFor)
		defer cancel()
		m := &nats.Msg{Subject: d.msg.Subject(), Data: []byte(d.id), Header: nats.Header{}}
		m.Header.Set(HeaderJob, d.id)
		if h := d.msg.Headers(); h != nil {
			m.Header.Set(HeaderKind, h.Get(HeaderKind))
		}
		err := retry(ctx, func(ctx context.Context) error {
			_, err := d.q.b.js.PublishMsg(ctx, m)
			return err
		})
		log := d.q.b.opt.Logger
		if err != nil {
			d.q.putBackWarn.warn(log, "put back job: publish failed, negatively acknowledged instead", err, "job", d.id)
			if err := d.msg.Nak(); err != nil {
				return fmt.Errorf("put back job %s: %w", d.id, err)
			}
			return nil
		}
		if err := d.msg.DoubleAck(ctx); err != nil {
			// Published again but not acknowledged: the old message is
			// delivered again after AckWait, and of the job's two
			// messages the second to arrive finds it started or
			// finished and is dropped.
			d.q.putBackWarn.warn(log, "put back job: acknowledge failed", err, "job", d.id)
			return fmt.Errorf("put back job %s: %w", d.id, err)
		}
		return nil
	})
}

// InProgress implements jobs.Delivery. The delivery's heartbeat already
// sends one every AckWait/3, so InProgress sends one only when the last
// is older than that (the heartbeat late, on a loaded machine): each is
// a write of the replicated consumer's state on every node, and the
// runner calls InProgress at the start of every solve and computation.
func (d *delivery) InProgress() error {
	if time.Since(time.Unix(0, d.beat.Load())) < d.every {
		return nil
	}
	d.beat.Store(time.Now().UnixNano())
	return d.msg.InProgress()
}

// deadLetter publishes j on <prefix>.dead.<kind>.
func (q *Queue) deadLetter(ctx context.Context, j *jobs.Job, delivered uint64) error {
	dl := DeadLetter{Job: j.ID, Kind: j.Kind, Series: j.Series, Frame: j.FrameIndex, Attempts: j.Attempts,
		Deliveries: delivered, Error: j.Error, Time: time.Now().UTC()}
	if dl.Error == nil {
		dl.Error = &jobs.Failure{Title: "Failed", Detail: "no reason recorded"}
	}
	data, err := json.Marshal(dl)
	if err != nil {
		return err
	}
	kind := j.Kind
	switch kind {
	case jobs.Analysis, jobs.Frame, jobs.Stereo:
	default:
		kind = "unknown"
	}
	m := &nats.Msg{Subject: q.b.n.deadSubject(kind), Data: data, Header: nats.Header{}}
	m.Header.Set(HeaderJob, j.ID)
	m.Header.Set(HeaderKind, string(j.Kind))
	reason := dl.Error.Title
	if dl.Error.Detail != "" {
		reason += ": " + dl.Error.Detail
	}
	m.Header.Set(HeaderReason, reason)
	err = retry(ctx, func(ctx context.Context) error {
		_, err := q.b.js.PublishMsg(ctx, m, jetstream.WithMsgID("dead-"+j.ID))
		return err
	})
	if err == nil {
		q.b.opt.Logger.Warn("job dead-lettered", "job", j.ID, "kind", j.Kind, "reason", reason)
	}
	return err
}

// DeadLetters returns the dead letters stored so far, oldest first (for
// inspection and tests; the nats CLI shows them too:
// nats stream view <PREFIX>_DEAD).
func (b *Backend) DeadLetters(ctx context.Context) ([]DeadLetter, error) {
	st, err := b.js.Stream(ctx, b.n.deadStream)
	if err != nil {
		return nil, fmt.Errorf("dead-letter stream: %w", err)
	}
	info, err := st.Info(ctx)
	if err != nil {
		return nil, fmt.Errorf("dead-letter stream: %w", err)
	}
	var out []DeadLetter
	if info.State.Msgs == 0 {
		return out, nil
	}
	for seq := info.State.FirstSeq; seq <= info.State.LastSeq; seq++ {
		m, err := st.GetMsg(ctx, seq)
		if errors.Is(err, jetstream.ErrMsgNotFound) {
			continue
		}
		if err != nil {
			return out, fmt.Errorf("dead letter %d: %w", seq, err)
		}
		var dl DeadLetter
		if err := json.Unmarshal(m.Data, &dl); err != nil {
			return out, fmt.Errorf("dead letter %d: %w", seq, err)
		}
		dl.Subject = m.Subject
		out = append(out, dl)
	}
	return out, nil
}

// Pending returns the number of job messages in the work-queue stream:
// waiting, running or awaiting redelivery (0 once every job is settled).
func (b *Backend) Pending(ctx context.Context) (uint64, error) {
	st, err := b.js.Stream(ctx, b.n.jobStream)
	if err != nil {
		return 0, fmt.Errorf("job stream: %w", err)
	}
	info, err := st.Info(ctx)
	if err != nil {
		return 0, fmt.Errorf("job stream: %w", err)
	}
	return info.State.Msgs, nil
}

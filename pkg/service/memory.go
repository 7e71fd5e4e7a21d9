package service

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"image"
	"image/color"
	"math"
	"net/http"
	"runtime/debug"
	"sort"
	"sync"
	"time"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// Bytes a job or an upload holds per pixel, for the memory budget. The job
// figure is measured: BenchmarkAnalysisMemory (pkg/runner) puts the peak
// heap of a 2D analysis, its results encoded, above its two decoded
// float32 images (8 B/px) at 100–128 B/px in 11 of 12 runs and 139 once
// with the collector at GOGC 5 (close to the live heap), and 138–175 B/px
// at the default GOGC 100, on 512² and 1024² pairs at steps 8 and 16 on
// one and two threads (B-spline coefficients, gradients and the
// correlation's buffers). The charge, 144 B/px, is the images and the
// live peak. A frame also holds the previous frame (16 B/px more). A
// stereo job or a frame of a stereo series holds four decoded images and
// prepares one camera's pair at a time, on the crop its points reach:
// BenchmarkStereoMemory (pkg/runner) measures its peak, four images
// included, at 0.82–0.87 of a 2D analysis' on the same 640×480 images in
// the same run (146 and 137 against 167 B/px), so both are charged as a
// 2D analysis. See README, "Reliability".
const (
	jobBytesPerPixel   = 144
	frameBytesPerPixel = 160
	maskBytesPerPixel  = 4
	// decodeBytesPerPixel is the float32 image plus its upright turn;
	// the decoder's own pixels are added by colour model (srcBytes).
	decodeBytesPerPixel = 8
)

// memBudget is a budget of bytes shared by the uploads being decoded and
// the jobs being computed. Waiters are served first come, first served,
// and a waiter holds nothing while it waits, so that two requests never
// wait for each other.
type memBudget struct {
	total int64

	mu      sync.Mutex
	used    int64
	peak    int64
	waiting []*memWaiter

	waits, refused uint64
}

type memWaiter struct {
	n       int64
	ready   chan struct{}
	granted bool
}

// newMemBudget returns the budget of cfg, or nil when it is turned off.
func newMemBudget(cfg *Config) *memBudget {
	if cfg.MaxMemory < 0 {
		return nil
	}
	return &memBudget{total: cfg.MaxMemory}
}

// DefaultMaxMemory is the memory budget used when Config.MaxMemory is 0:
// three quarters of the Go memory limit (GOMEMLIMIT) when one is set,
// otherwise half of the machine's (or the control group's) memory, and 4
// GiB when neither can be read.
func DefaultMaxMemory() int64 {
	if lim := debug.SetMemoryLimit(-1); lim > 0 && lim < math.MaxInt64 {
		return lim / 4 * 3
	}
	if n := systemMemory(); n > 0 {
		return n / 2
	}
	return 4 << 30
}

// tryAcquire takes n bytes if they are free now and nobody waits.
func (b *memBudget) tryAcquire(n int64) bool {
	b.mu.Lock()
	defer b.mu.Unlock()
	if len(b.waiting) == 0 && b.used+n <= b.total {
		b.take(n)
		return true
	}
	return false
}

func (b *memBudget) take(n int64) {
	b.used += n
	b.peak = max(b.peak, b.used)
}

// acquire waits until n bytes (at most the total) are free, in turn, or
// ctx is done.
func (b *memBudget) acquire(ctx context.Context, n int64) error {
	if b.tryAcquire(n) {
		return nil
	}
	b.mu.Lock()
	if len(b.waiting) == 0 && b.used+n <= b.total {
		b.take(n)
		b.mu.Unlock()
		return nil
	}
	w := &memWaiter{n: n, ready: make(chan struct{})}
	b.waiting = append(b.waiting, w)
	b.waits++
	b.mu.Unlock()
	select {
	case <-w.ready:
		return nil
	case <-ctx.Done():
	}
	b.mu.Lock()
	defer b.mu.Unlock()
	if w.granted {
		return nil
	}
	for i, o := range b.waiting {
		if o == w {
			b.waiting = append(b.waiting[:i], b.waiting[i+1:]...)
			break
		}
	}
	b.grant() // the next in line may fit now
	return context.Cause(ctx)
}

// release gives n bytes back and wakes the waiters that fit, in order.
func (b *memBudget) release(n int64) {
	if n == 0 {
		return
	}
	b.mu.Lock()
	b.used -= n
	b.grant()
	b.mu.Unlock()
}

func (b *memBudget) grant() {
	for len(b.waiting) > 0 && b.used+b.waiting[0].n <= b.total {
		w := b.waiting[0]
		b.waiting = b.waiting[1:]
		b.take(w.n)
		w.granted = true
		close(w.ready)
	}
}

type memStats struct {
	total, used, peak int64
	waiting           int
	waits, refused    uint64
}

func (b *memBudget) stats() memStats {
	b.mu.Lock()
	defer b.mu.Unlock()
	return memStats{b.total, b.used, b.peak, len(b.waiting), b.waits, b.refused}
}

// memHold is what one request holds of the budget.
type memHold struct {
	b    *memBudget
	mu   sync.Mutex
	n    int64
	wait time.Duration
}

// grow makes the hold add bytes larger. If they are not free now, it
// gives back what it holds and waits, for at most the hold's wait, for
// the whole amount.
func (h *memHold) grow(ctx context.Context, add int64) error {
	h.mu.Lock()
	defer h.mu.Unlock()
	need := h.n + add
	if need > h.b.total {
		h.b.mu.Lock()
		h.b.refused++
		h.b.mu.Unlock()
		return &memTooLargeError{need: need, total: h.b.total}
	}
	if h.b.tryAcquire(add) {
		h.n = need
		return nil
	}
	h.b.release(h.n)
	h.n = 0
	ctx, cancel := context.WithTimeoutCause(ctx, h.wait, errMemoryBusy)
	defer cancel()
	if err := h.b.acquire(ctx, need); err != nil {
		if errors.Is(err, errMemoryBusy) {
			h.b.mu.Lock()
			h.b.refused++
			h.b.mu.Unlock()
		}
		return err
	}
	h.n = need
	return nil
}

func (h *memHold) release() {
	h.mu.Lock()
	defer h.mu.Unlock()
	h.b.release(h.n)
	h.n = 0
}

var errMemoryBusy = errors.New("memory budget busy")

// memTooLargeError is an upload that needs more than the whole budget.
type memTooLargeError struct {
	need, total int64
	fields      []string // the image parts
}

func (e *memTooLargeError) Error() string {
	return fmt.Sprintf("the upload needs about %s of memory to decode, more than the server's whole memory budget of %s", mib(e.need), mib(e.total))
}

type holdKey struct{}

// smallBody is the body length below which a request takes no memory
// of the budget for its body (it may still for decoding an image in it).
const smallBody = 64 << 10

// holdMemory gives an upload request its hold of the memory budget: twice
// its body length (reading a body of unknown length takes up to twice
// its size) or, for a body of unknown length, the body limit; nothing
// for a small body. It answers
// 413 or 503 itself and returns nil when the request must end.
func (s *Server) holdMemory(w http.ResponseWriter, r *http.Request) (*http.Request, *memHold) {
	h := &memHold{b: s.mem, wait: s.cfg.MemoryWait}
	n := r.ContentLength
	if n < 0 || n > s.cfg.MaxBodyBytes {
		n = min(s.cfg.MaxBodyBytes, s.mem.total)
	}
	if n > smallBody {
		if err := h.grow(r.Context(), 2*n); err != nil {
			s.memoryProblem(w, r, err)
			return nil, nil
		}
	}
	return r.WithContext(context.WithValue(r.Context(), holdKey{}, h)), h
}

// admitDecode grows the request's hold by what decoding the images raw
// (by part name) will take, read from their headers; a header that cannot
// be read, or that is over the pixel limit, is left to the decoder to
// report. Requests without a hold (no budget) pass.
func (s *Server) admitDecode(r *http.Request, raw map[string][]byte) error {
	h, _ := r.Context().Value(holdKey{}).(*memHold)
	if h == nil {
		return nil
	}
	var need int64
	var names []string
	for name, b := range raw {
		cfg, _, err := image.DecodeConfig(bytes.NewReader(b))
		px := int64(cfg.Width) * int64(cfg.Height)
		if err != nil || px > s.cfg.MaxPixels {
			continue
		}
		need += px * (srcBytes(cfg.ColorModel) + decodeBytesPerPixel)
		names = append(names, name)
	}
	if need == 0 {
		return nil
	}
	err := h.grow(r.Context(), need)
	var tl *memTooLargeError
	if errors.As(err, &tl) {
		sort.Strings(names)
		tl.fields = names
	}
	return err
}

// srcBytes is the bytes per pixel the standard decoders use for a colour
// model (the image.Image before it becomes float32).
func srcBytes(m color.Model) int64 {
	switch m {
	case color.GrayModel:
		return 1
	case color.Gray16Model:
		return 2
	case color.YCbCrModel:
		return 3
	case color.RGBAModel, color.NRGBAModel, color.CMYKModel:
		return 4
	case color.RGBA64Model, color.NRGBA64Model:
		return 8
	}
	if _, ok := m.(color.Palette); ok {
		return 1
	}
	return 8
}

// memoryProblem answers an upload refused by the memory budget.
func (s *Server) memoryProblem(w http.ResponseWriter, r *http.Request, err error) {
	writeProblem(w, r, s.memoryErrProblem(w, err))
}

func (s *Server) memoryErrProblem(w http.ResponseWriter, err error) *Problem {
	var tl *memTooLargeError
	if errors.As(err, &tl) {
		p := problem(http.StatusRequestEntityTooLarge, "over-memory-budget", "Upload too large for the memory budget",
			tl.Error()+"; send smaller images (crop or bin them), or ask the operator for a larger --max-memory-mb")
		for _, f := range tl.fields {
			p.Errors = append(p.Errors, FieldProblem{f, "with the other images, too large for the server's memory budget"})
		}
		return p
	}
	st := s.mem.stats()
	retryAfter(w, max(5, s.retrySeconds()))
	return problem(http.StatusServiceUnavailable, "memory-busy", "Memory budget in use",
		fmt.Sprintf("the uploads and jobs in progress hold %s of the server's memory budget of %s and this upload did not fit within %v; retry after the time in Retry-After",
			mib(st.used), mib(st.total), s.cfg.MemoryWait))
}

// memoryErr turns an error of admitDecode into a problem for the
// request's answer (an error that is not the budget's passes).
func (s *Server) memoryErr(w http.ResponseWriter, err error) error {
	var tl *memTooLargeError
	if errors.As(err, &tl) || errors.Is(err, errMemoryBusy) {
		return s.memoryErrProblem(w, err)
	}
	return err
}

// jobBytes is the memory job j holds while it is computed; stereo is true
// for a frame of a stereo series.
func jobBytes(j *jobs.Job, stereo bool) int64 {
	px := int64(j.Width) * int64(j.Height)
	per := int64(jobBytesPerPixel)
	if j.Kind == jobs.Frame && !stereo {
		per = frameBytesPerPixel
	}
	if j.HasMask {
		per += maskBytesPerPixel
	}
	return px * per
}

// memQueue hands a job to a worker only once the memory it will hold is
// free in the budget; the delivery gives it back when it is acknowledged
// or put back. A job bigger than the whole budget takes all of it, and so
// runs alone.
type memQueue struct {
	jobs.Queue
	b     *memBudget
	store jobs.Store
}

func (q memQueue) Dequeue(ctx context.Context) (jobs.Delivery, error) {
	d, err := q.Queue.Dequeue(ctx)
	if err != nil {
		return nil, err
	}
	n := int64(0)
	if j, err := q.store.Job(ctx, d.ID()); err == nil && !j.State.Terminal() {
		stereo := false
		if j.Kind == jobs.Frame {
			sr, err := q.store.Series(ctx, j.Series)
			stereo = err == nil && sr.Kind == jobs.Stereo
		}
		n = min(jobBytes(j, stereo), q.b.total)
	}
	if n == 0 {
		return d, nil
	}
	if !q.b.tryAcquire(n) {
		// Wait in turn, telling the queue now and then that the delivery
		// is still held.
		wctx, cancel := context.WithCancel(ctx)
		done := make(chan struct{})
		go func() {
			t := time.NewTicker(2 * time.Second)
			defer t.Stop()
			for {
				select {
				case <-done:
					return
				case <-t.C:
					_ = d.InProgress()
				}
			}
		}()
		err := q.b.acquire(wctx, n)
		close(done)
		cancel()
		if err != nil {
			_ = d.Nak()
			return nil, err
		}
	}
	return &memDelivery{Delivery: d, b: q.b, n: n}, nil
}

// memDelivery gives its job's memory back once, when it is acknowledged
// or put back.
type memDelivery struct {
	jobs.Delivery
	b    *memBudget
	n    int64
	once sync.Once
}

func (d *memDelivery) Ack() error {
	err := d.Delivery.Ack()
	d.once.Do(func() { d.b.release(d.n) })
	return err
}

func (d *memDelivery) Nak() error {
	err := d.Delivery.Nak()
	d.once.Do(func() { d.b.release(d.n) })
	return err
}

// budgetBackend returns b with its queue waiting for memory (b itself
// without a budget).
func budgetBackend(b *jobs.Backend, m *memBudget) *jobs.Backend {
	if m == nil {
		return b
	}
	c := *b
	c.Queue = memQueue{Queue: b.Queue, b: m, store: b.Store}
	return &c
}

package service

import (
	"context"
	"crypto/sha256"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// Server is the Mottle HTTP service with its worker pool.
type Server struct {
	cfg     Config
	log     *slog.Logger
	store   jobs.Store
	blobs   jobs.Blobs
	queue   jobs.Queue
	tokens  [][sha256.Size]byte
	tickets tickets
	rates   rates
	metrics *metrics
	handler http.Handler

	draining atomic.Bool
	// stopping is closed when shutdown begins: event streams and waits end.
	stopping chan struct{}
	stopOnce sync.Once

	mu      sync.Mutex
	running map[string]context.CancelCauseFunc

	clock clock // of the frame gate; wallClock except in its test

	// checking bounds the image checks computed at once (they run
	// on the request goroutine, outside the job queue).
	checking chan struct{}

	// lives holds the live sessions by series id (*liveSession).
	lives sync.Map

	// keyLocks serialises requests of one Idempotency-Key.
	keyLocks keyLocks
}

// New checks cfg and returns a server. It starts nothing: call Serve, or
// Start and use Handler.
func New(cfg Config) (*Server, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	cfg.defaults()
	s := &Server{
		cfg:      cfg,
		log:      cfg.Logger,
		store:    cfg.Backend.Store,
		blobs:    cfg.Backend.Blobs,
		queue:    cfg.Backend.Queue,
		metrics:  newMetrics(),
		stopping: make(chan struct{}),
		running:  map[string]context.CancelCauseFunc{},
		clock:    wallClock{},

		checking: make(chan struct{}, cfg.Workers),
	}
	for _, t := range cfg.Tokens {
		s.tokens = append(s.tokens, sha256.Sum256([]byte(strings.TrimSpace(t))))
	}
	s.rates = rates{rate: cfg.RateLimit, burst: cfg.RateBurst}
	s.handler = s.routes()
	return s, nil
}

// Handler returns the HTTP handler of the service.
func (s *Server) Handler() http.Handler { return s.handler }

// Errors that stop a job, told apart by context.Cause.
var (
	errShutdown   = errors.New("server shutting down")
	errCanceled   = errors.New("canceled by a client")
	errJobTimeout = errors.New("job timeout")
)

// Start recovers jobs left by an earlier run and starts the workers and the
// retention janitor. It returns a function that stops them: it stops taking
// new jobs, lets running ones go on for up to Config.ShutdownGrace, then
// stops those and puts them back in the queue, and returns when every
// worker has ended.
func (s *Server) Start(ctx context.Context) (stop func(), err error) {
	if rec := s.cfg.Backend.Recover; rec != nil {
		n, err := rec(ctx)
		if err != nil {
			return nil, fmt.Errorf("recover jobs: %w", err)
		}
		s.metrics.mu.Lock()
		s.metrics.recovered += uint64(n)
		s.metrics.mu.Unlock()
		if n > 0 {
			s.log.Info("recovered jobs from an earlier run", "jobs", n)
		}
	}
	dequeueCtx, stopDequeue := context.WithCancel(context.Background())
	jobCtx, stopJobs := context.WithCancelCause(context.Background())
	var wg sync.WaitGroup
	for i := 0; i < s.cfg.Workers; i++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			s.work(dequeueCtx, jobCtx)
		}()
	}
	janitorCtx, stopJanitor := context.WithCancel(context.Background())
	var jwg sync.WaitGroup
	if s.cfg.Retention > 0 {
		jwg.Add(1)
		go func() {
			defer jwg.Done()
			s.janitor(janitorCtx)
		}()
	}
	var once sync.Once
	return func() {
		once.Do(func() {
			s.beginStop()
			stopDequeue()
			stopJanitor()
			done := make(chan struct{})
			go func() { wg.Wait(); close(done) }()
			select {
			case <-done:
			case <-time.After(s.cfg.ShutdownGrace):
				s.log.Warn("shutdown grace over: stopping running jobs and putting them back in the queue")
				stopJobs(errShutdown)
				<-done
			}
			stopJobs(errShutdown)
			jwg.Wait()
		})
	}, nil
}

func (s *Server) beginStop() {
	s.draining.Store(true)
	s.stopOnce.Do(func() { close(s.stopping) })
}

// Serve starts the workers and serves HTTP on ln until ctx is done, then
// shuts down gracefully: it stops accepting connections, ends event
// streams, waits for in-flight requests, and stops the workers (see Start).
func (s *Server) Serve(ctx context.Context, ln net.Listener) error {
	stop, err := s.Start(ctx)
	if err != nil {
		return err
	}
	hs := &http.Server{
		Handler:           s.handler,
		ReadHeaderTimeout: s.cfg.ReadHeaderTimeout,
		ReadTimeout:       s.cfg.ReadTimeout,
		WriteTimeout:      s.cfg.WriteTimeout,
		IdleTimeout:       s.cfg.IdleTimeout,
		MaxHeaderBytes:    64 << 10,
		ErrorLog:          slog.NewLogLogger(s.log.Handler(), slog.LevelWarn),
	}
	errc := make(chan error, 1)
	go func() { errc <- hs.Serve(ln) }()
	s.log.Info("serving", "addr", ln.Addr().String(), "workers", s.cfg.Workers, "queue", s.queue.Cap())
	select {
	case err = <-errc:
		stop()
		return err
	case <-ctx.Done():
	}
	s.log.Info("shutting down")
	s.beginStop()
	sctx, cancel := context.WithTimeout(context.Background(), s.cfg.ShutdownGrace)
	defer cancel()
	herr := hs.Shutdown(sctx)
	stop()
	if herr != nil {
		hs.Close()
		return fmt.Errorf("http shutdown: %w", herr)
	}
	if err := <-errc; err != nil && !errors.Is(err, http.ErrServerClosed) {
		return err
	}
	s.log.Info("stopped")
	return nil
}

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

	"github.com/mottledic/mottle/pkg/runner"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// Server is the Mottle HTTP service; its jobs are computed by a
// runner.Runner it starts with it.
type Server struct {
	cfg     Config
	log     *slog.Logger
	store   jobs.Store
	blobs   jobs.Blobs
	queue   jobs.Queue
	audit   jobs.Audit
	tokens  [][sha256.Size]byte
	tickets tickets
	// tokAudit: the token-file changes recorded in the audit trail.
	tokAudit tokenAudit
	rates    rates
	metrics  *metrics
	run      *runner.Runner
	handler  http.Handler

	draining atomic.Bool
	// stopping is closed when shutdown begins: event streams and waits end.
	stopping chan struct{}
	stopOnce sync.Once

	// checking bounds the image checks computed at once (they run
	// on the request goroutine, outside the job queue).
	checking chan struct{}

	// lives holds the live sessions by series id (*liveSession).
	lives sync.Map
	// instance names this server process in the marks of its live
	// sessions (liveMark).
	instance string

	// keyLocks serialises requests of one Idempotency-Key.
	keyLocks keyLocks

	// disk watches the free space of Config.DataDir (nil without one).
	disk *diskGuard
	// mem is the memory budget (nil when turned off).
	mem *memBudget
	// inflight counts the requests being served.
	inflight atomic.Int64
	// damaged is the number of jobs checkData marked failed.
	damaged atomic.Int64
}

// New checks cfg and returns a server. It starts nothing: call Serve, or
// Start and use Handler.
func New(cfg Config) (*Server, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	cfg.defaults()
	disk := newDiskGuard(&cfg)
	cfg.Backend = guardBackend(cfg.Backend, disk)
	mem := newMemBudget(&cfg)
	cfg.Backend = budgetBackend(cfg.Backend, mem)
	run, err := runner.New(runner.Config{Backend: cfg.Backend, Analyzer: cfg.Analyzer, Logger: cfg.Logger,
		Workers: cfg.Workers, JobThreads: cfg.JobThreads, MaxAttempts: cfg.MaxAttempts,
		MaxPixels: cfg.MaxPixels, MaxBytes: cfg.MaxBodyBytes, JobTimeout: cfg.JobTimeout,
		ShutdownGrace: cfg.ShutdownGrace, Retention: cfg.Retention, BeforeCompute: cfg.BeforeCompute, StateJSON: cfg.StateJSON})
	if err != nil {
		return nil, err
	}
	s := &Server{
		cfg:      cfg,
		log:      cfg.Logger,
		store:    cfg.Backend.Store,
		blobs:    cfg.Backend.Blobs,
		queue:    cfg.Backend.Queue,
		audit:    cfg.Backend.Audit,
		metrics:  newMetrics(),
		run:      run,
		stopping: make(chan struct{}),
		instance: jobs.NewID(),

		checking: make(chan struct{}, cfg.Workers),
		disk:     disk,
		mem:      mem,
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

// errShutdown ends the waits of requests when shutdown begins.
var errShutdown = errors.New("server shutting down")

// Start starts the server's runner (runner.Runner.Start): it recovers jobs
// left by an earlier run and starts the workers and the retention janitor.
// It returns a function that stops them: it ends event streams and waits,
// stops taking new jobs, lets running ones go on for up to
// Config.ShutdownGrace, then stops those and puts them back in the queue,
// and returns when every worker has ended.
func (s *Server) Start(ctx context.Context) (stop func(), err error) {
	if err := s.beforeStart(ctx); err != nil {
		return nil, err
	}
	rstop, err := s.run.Start(ctx)
	if err != nil {
		return nil, err
	}
	s.auditTokens(ctx)
	return func() {
		s.beginStop()
		rstop()
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

// Package runner runs Mottle's jobs: it takes analyses and series frames
// from the queue of a jobs.Backend, keeps the frames of a series in order,
// computes them with an Analyzer (Pipeline for the real pipeline), stores
// their results and outcome, cancels them on request, applies the
// retention setting and counts the job metrics.
//
// The HTTP service (package service) accepts jobs and serves their
// results; the worker command (mottle worker) runs a Runner alone. The
// runner imports neither net/http nor any handler code.
package runner

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"runtime"
	"sync"
	"time"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// Config configures a Runner. Zero fields take the documented defaults.
type Config struct {
	// Backend keeps jobs; required.
	Backend *jobs.Backend
	// Analyzer computes analyses; required (Pipeline for the real one).
	Analyzer Analyzer
	// Logger receives logs; default slog.Default().
	Logger *slog.Logger

	// Workers is the number of jobs computed at once; default the number
	// of CPUs.
	Workers int
	// JobThreads is the thread count each job uses. The default (0) is 1,
	// except that an analysis job (not a series frame) that starts while
	// fewer jobs run than there are cores also takes the idle ones: it
	// uses GOMAXPROCS / (jobs running), so one request on an idle server
	// is correlated on every core. Results never depend on it.
	JobThreads int
	// MaxAttempts is how many times a job is started before it is failed
	// (a job that crashes the process is not retried for ever); default 3.
	MaxAttempts int
	// MaxPixels and MaxBytes limit each stored image decoded; defaults
	// imageio.DefaultMaxPixels and 256 MiB.
	MaxPixels, MaxBytes int64

	// JobTimeout bounds the compute time of one job; default 30 min.
	JobTimeout time.Duration
	// ShutdownGrace is how long running jobs may go on after stop is
	// called before they are stopped and put back in the queue; default
	// 30 s.
	ShutdownGrace time.Duration
	// Retention removes finished analyses, and series not updated, after
	// this long; 0 keeps everything.
	Retention time.Duration
	// StateJSON stores the state of a series after each frame as JSON
	// (StateKey) instead of the binary form (BinaryStateKey), which is
	// about a third of the bytes and decodes and encodes without
	// formatting numbers. Workers from before the binary form read only
	// the JSON: one of them given the next frame of a series whose state is
	// binary finds no state under StateKey and fails that frame ("the
	// series cannot continue"). Set StateJSON on the new workers of a
	// cluster while it still has such workers (a rolling upgrade), and
	// clear it once none is left. Either way a runner reads both forms.
	StateJSON bool

	// BeforeCompute, if not nil, is called by a worker after it has
	// recorded job j as running and before it loads the inputs and
	// computes, with the job's context; the job waits until it returns.
	// It is a test hook; leave it nil in production.
	BeforeCompute func(ctx context.Context, j jobs.Job)

	spareThreads bool // JobThreads was left at 0: analysis jobs take idle cores

	// beforeSolutionStore, if not nil, is called by solveAhead with the
	// frame's record as read before the solve, once the frame is solved
	// and before its solution is stored (a test hook: a worker stalled
	// there).
	beforeSolutionStore func(j jobs.Job)
	// afterState, if not nil, is called by runJob once the state of
	// frame j is stored and before its outcome is recorded (a test hook:
	// a worker that stops there).
	afterState func(j jobs.Job)
}

// WithDefaults returns c with its zero fields set to their documented
// defaults, the one set of them: the service takes its worker count,
// attempts, pixel limit, job timeout and shutdown grace from here.
// JobThreads stays as it is (0: one thread, and the idle cores for a lone
// analysis, decided when the runner is made).
func (c Config) WithDefaults() Config {
	threads := c.JobThreads
	c.defaults()
	c.JobThreads, c.spareThreads = threads, false
	return c
}

func (c *Config) defaults() {
	if c.Logger == nil {
		c.Logger = slog.Default()
	}
	if c.Workers <= 0 {
		c.Workers = runtime.NumCPU()
	}
	if c.JobThreads <= 0 {
		c.JobThreads, c.spareThreads = 1, true
	}
	if c.MaxAttempts <= 0 {
		c.MaxAttempts = 3
	}
	if c.MaxPixels <= 0 {
		c.MaxPixels = imageio.DefaultMaxPixels
	}
	if c.MaxBytes <= 0 {
		c.MaxBytes = 256 << 20
	}
	if c.JobTimeout <= 0 {
		c.JobTimeout = 30 * time.Minute
	}
	if c.ShutdownGrace <= 0 {
		c.ShutdownGrace = 30 * time.Second
	}
}

// Runner computes the jobs of a backend with a pool of workers.
type Runner struct {
	cfg     Config
	log     *slog.Logger
	store   jobs.Store
	blobs   jobs.Blobs
	queue   jobs.Queue
	metrics *metrics

	mu      sync.Mutex
	running map[string]context.CancelCauseFunc

	clock clock // of the frame gate; wallClock except in its test

	primed primedSet  // images decoded by the handlers (Prime)
	refq   refQuality // the quality measures of recent references
	// decoded holds the images of series frames decoded lately.
	decoded decodedSet
	// seriesRecs holds the series records read lately (seriesOf).
	seriesRecs seriesRecs
}

// New checks cfg and returns a runner. It starts nothing: call Start.
func New(cfg Config) (*Runner, error) {
	var errs []error
	if cfg.Backend == nil || cfg.Backend.Store == nil || cfg.Backend.Blobs == nil || cfg.Backend.Queue == nil {
		errs = append(errs, errors.New("runner config: Backend with Store, Blobs and Queue is required"))
	}
	if cfg.Analyzer == nil {
		errs = append(errs, errors.New("runner config: Analyzer is required"))
	}
	if cfg.Retention < 0 {
		errs = append(errs, fmt.Errorf("runner config: Retention is %v; use 0 (keep everything) or a positive duration", cfg.Retention))
	}
	if err := errors.Join(errs...); err != nil {
		return nil, err
	}
	cfg.defaults()
	return &Runner{
		cfg:     cfg,
		log:     cfg.Logger,
		store:   cfg.Backend.Store,
		blobs:   cfg.Backend.Blobs,
		queue:   cfg.Backend.Queue,
		metrics: newMetrics(),
		running: map[string]context.CancelCauseFunc{},
		clock:   wallClock{},
	}, nil
}

// Workers returns the size of the worker pool.
func (s *Runner) Workers() int { return s.cfg.Workers }

// Errors that stop a job, told apart by context.Cause.
var (
	errShutdown   = errors.New("runner stopping")
	errCanceled   = errors.New("canceled by a client")
	errJobTimeout = errors.New("job timeout")
)

// Start recovers jobs left by an earlier run and starts the workers and the
// retention janitor. It returns a function that stops them: it stops taking
// new jobs, lets running ones go on for up to Config.ShutdownGrace, then
// stops those and puts them back in the queue, and returns when every
// worker has ended.
func (s *Runner) Start(ctx context.Context) (stop func(), err error) {
	if rec := s.cfg.Backend.Recover; rec != nil {
		n, err := rec(ctx)
		if err != nil {
			return nil, fmt.Errorf("recover jobs: %w", err)
		}
		s.metrics.recover(n)
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

// Stats are the job counters of a runner since it was made.
type Stats struct {
	// Finished counts the jobs finished by this runner by final state.
	Finished map[jobs.State]uint64
	// Points and ComputeSeconds add up the grid points and compute time
	// of succeeded jobs; Rate is the points per second per job, an
	// exponentially weighted mean over recent jobs.
	Points         uint64
	ComputeSeconds float64
	Rate           float64
	// Busy is the number of workers computing a job now.
	Busy int
	// Recovered counts the jobs put back in the queue at start from an
	// earlier run.
	Recovered uint64
	// InFlight holds, by series id, the frames of the series this runner
	// is computing now (solving ahead or adding to the state); series with
	// none are left out.
	InFlight map[string]int
	// SolvedAhead counts the frames solved before their predecessor
	// finished, and SolveSeconds their compute time.
	SolvedAhead  uint64
	SolveSeconds float64
	// GuessSolved, GuessExtrapolated, GuessState and GuessNone count the
	// frames solved ahead by the source of their initial guess: the
	// solution of a frame before them, that solution moved on along the
	// step from the frame before it (series.Extrapolate: the frame just
	// before was not solved yet), the series state after the last finished
	// frame, or none (the seed search).
	GuessSolved, GuessExtrapolated, GuessState, GuessNone uint64
	// AddedSolved counts the frames added to their series' state from a
	// solution found ahead, and AddSeconds their compute time: the part
	// of a frame done in frame order.
	AddedSolved uint64
	AddSeconds  float64
	// HeldSeconds adds up the time frames were held waiting for their
	// predecessor (solving ahead not counted): workers' idle time.
	HeldSeconds float64
}

// Stats returns a copy of the job counters.
func (s *Runner) Stats() Stats {
	m := s.metrics
	m.mu.Lock()
	defer m.mu.Unlock()
	st := m.Stats
	st.Finished = make(map[jobs.State]uint64, len(m.Finished))
	for k, v := range m.Finished {
		st.Finished[k] = v
	}
	st.InFlight = make(map[string]int, len(m.InFlight))
	for k, v := range m.InFlight {
		st.InFlight[k] = v
	}
	return st
}

// metrics are the job counters behind Stats.
type metrics struct {
	mu sync.Mutex
	Stats
}

func newMetrics() *metrics {
	return &metrics{Stats: Stats{Finished: map[jobs.State]uint64{}, InFlight: map[string]int{}}}
}

func (m *metrics) jobDone(state jobs.State, points int, seconds float64) {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.Finished[state]++
	if state == jobs.Succeeded && seconds > 0 {
		m.Points += uint64(points)
		m.ComputeSeconds += seconds
		r := float64(points) / seconds
		if m.Rate == 0 {
			m.Rate = r
		} else {
			m.Rate = 0.8*m.Rate + 0.2*r
		}
	}
}

func (m *metrics) setBusy(delta int) {
	m.mu.Lock()
	m.Busy += delta
	m.mu.Unlock()
}

func (m *metrics) recover(n int) {
	m.mu.Lock()
	m.Recovered += uint64(n)
	m.mu.Unlock()
}

// inFlight counts a frame of series id starting (delta 1) or ending (−1).
func (m *metrics) inFlight(id string, delta int) {
	m.mu.Lock()
	defer m.mu.Unlock()
	if m.InFlight[id] += delta; m.InFlight[id] <= 0 {
		delete(m.InFlight, id)
	}
}

func (m *metrics) added(seconds float64) {
	m.mu.Lock()
	m.AddedSolved++
	m.AddSeconds += seconds
	m.mu.Unlock()
}

func (m *metrics) held(seconds float64) {
	m.mu.Lock()
	m.HeldSeconds += seconds
	m.mu.Unlock()
}

func (m *metrics) solved(seconds float64, guess string) {
	m.mu.Lock()
	m.SolvedAhead++
	m.SolveSeconds += seconds
	switch guess {
	case guessSolved:
		m.GuessSolved++
	case guessExtrapolated:
		m.GuessExtrapolated++
	case guessState:
		m.GuessState++
	default:
		m.GuessNone++
	}
	m.mu.Unlock()
}

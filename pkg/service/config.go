package service

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"time"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/runner"
	"github.com/mottledic/mottle/pkg/service/access"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// Config configures a Server. Zero fields take the documented defaults;
// Workers, MaxAttempts, MaxPixels, JobTimeout and ShutdownGrace take
// those of runner.Config (runner.Config.WithDefaults).
type Config struct {
	// Backend keeps jobs; required (see package embedded for the default).
	Backend *jobs.Backend
	// Analyzer computes analyses; required (Pipeline for the real one).
	Analyzer Analyzer
	// Logger receives JSON logs; default slog to stderr.
	Logger *slog.Logger

	// Workers is the number of jobs computed at once; default the number
	// of CPUs.
	Workers int
	// JobThreads is the thread count each job uses. The default (0) is 1,
	// so that Workers jobs keep the cores busy without oversubscribing
	// them, except that an analysis that starts while fewer jobs run than
	// there are cores also takes the idle ones (runner.Config.JobThreads):
	// one request on an idle server is correlated on every core. Results
	// never depend on it.
	JobThreads int
	// MaxFramesInFlight is the bound on frames computed at once that each
	// new series gets (jobs.Series.MaxInFlight): frames of a direct-mode
	// series within that many of the last finished one are correlated
	// side by side and added to the series in order (package runner).
	// Default 1: one frame at a time, each started from the previous
	// frame's solution.
	MaxFramesInFlight int
	// StateJSON stores a series' state after each frame as JSON, the
	// only form workers from before the binary state read, instead of the
	// binary form (runner.Config.StateJSON): for the new nodes of a
	// cluster during a rolling upgrade.
	StateJSON bool
	// MaxAttempts is how many times a job is started before it is failed
	// (a job that crashes the process is not retried for ever); default 3.
	MaxAttempts int

	// MaxBodyBytes limits a request body; default 256 MiB.
	MaxBodyBytes int64
	// MaxPixels limits each image, checked from its header before
	// decoding; default 64 Mpx.
	MaxPixels int64
	// MaxPoints limits the grid points of one job (about W·H/step²);
	// default 1 000 000.
	MaxPoints int

	// ReadHeaderTimeout, ReadTimeout, WriteTimeout and IdleTimeout are
	// those of http.Server; defaults 10 s, 2 min, 2 min, 2 min. Event
	// streams and ?wait=true requests lift the write deadline for as
	// long as they need (waits are bounded by JobTimeout).
	ReadHeaderTimeout, ReadTimeout, WriteTimeout, IdleTimeout time.Duration
	// MinBodyRate is the slowest a request body may arrive, bytes a
	// second, once BodyRateGrace has passed since its first read; a
	// slower body is cut off and answered 408 (its upload leaves no job).
	// Default 16 KiB/s with a grace of 10 s; negative turns the rule off.
	MinBodyRate   int64
	BodyRateGrace time.Duration
	// JobTimeout bounds the compute time of one job; default 30 min.
	JobTimeout time.Duration
	// ShutdownGrace is how long running jobs may go on after shutdown
	// begins before they are stopped and put back in the queue; default 30 s.
	ShutdownGrace time.Duration
	// Retention removes finished analyses, and series not updated, after
	// this long; 0 keeps everything.
	Retention time.Duration

	// Tokens, when not empty, are the bearer tokens accepted on every
	// route except /healthz, /readyz and the browser page's static files.
	Tokens []string
	// TokenFile, if not nil, holds the tokens of named principals with
	// roles in projects (package access); it is reread when it changes,
	// so revocation needs no restart. Tokens and TokenFile may be used
	// together; with neither, every request acts for one implicit
	// principal with every role in every project.
	TokenFile *access.File
	// MaxQueuedPerPrincipal limits the jobs one principal may have
	// waiting (0 = no limit beyond the queue's); RateLimit the requests a
	// second of one principal, with bursts of RateBurst (default
	// 2·RateLimit, at least 1); 0 = no limit. Both apply only when tokens
	// are checked, and are answered 429 with Retry-After.
	MaxQueuedPerPrincipal int
	RateLimit, RateBurst  float64
	// CORSOrigins lists the origins allowed to call the API from a
	// browser ("*" for any); empty sends no CORS headers.
	CORSOrigins []string
	// UI, if not nil, is served at / (the browser preview's files, with
	// index.html at the root).
	UI fs.FS
	// Demo, if not nil, renders the built-in demo pair for POST /v1/demo,
	// with the parameters to analyse it.
	Demo func(ctx context.Context) (ref, def *imageio.Gray, p analysis.Params, err error)

	// DataDir, if not empty, is the directory the backend keeps its files
	// in (the embedded backend's data directory). The service then watches
	// its free space: while less than MinFreeBytes is free, /readyz
	// reports not ready and requests that would store new data are
	// answered 507; /metrics shows the free space. ReserveBytes are held
	// in a reserve file there, given up when a write fails for lack of
	// space so that the outcome of the jobs in flight can still be
	// recorded, and made again when space returns. Without DataDir (a
	// remote backend) only the writes themselves report a full disk (507).
	DataDir string
	// MinFreeBytes is the free-space threshold; default 256 MiB.
	MinFreeBytes int64
	// ReserveBytes is the size of the reserve file; default 8 MiB,
	// negative for none.
	ReserveBytes int64

	// MaxMemory is the memory budget, in bytes, shared by the uploads
	// being decoded and the jobs being computed (each estimated from its
	// image size). An upload that does not fit waits up to MemoryWait and
	// is then answered 503 with Retry-After (413 if it alone needs more
	// than the budget); a job waits in the queue until its memory is
	// free. 0 takes DefaultMaxMemory (from GOMEMLIMIT or the machine's
	// memory); negative turns the budget off.
	MaxMemory int64
	// MemoryWait is how long an upload waits for memory; default 10 s.
	MemoryWait time.Duration

	// BeforeCompute, if not nil, is called by a worker after it has
	// recorded job j as running and before it loads the inputs and
	// computes, with the job's context (canceled when the job is canceled,
	// times out or is stopped by shutdown); the job waits until it
	// returns. It is a test hook: a test holds a job running until it
	// releases it, instead of hoping a slow job is still running. Leave it
	// nil in production.
	BeforeCompute func(ctx context.Context, j jobs.Job)
}

func (c *Config) defaults() {
	if c.Logger == nil {
		c.Logger = slog.Default()
	}
	// The runner's defaults, the one set of them.
	rc := runner.Config{Workers: c.Workers, MaxAttempts: c.MaxAttempts, MaxPixels: c.MaxPixels,
		JobTimeout: c.JobTimeout, ShutdownGrace: c.ShutdownGrace}.WithDefaults()
	c.Workers, c.MaxAttempts, c.MaxPixels = rc.Workers, rc.MaxAttempts, rc.MaxPixels
	c.JobTimeout, c.ShutdownGrace = rc.JobTimeout, rc.ShutdownGrace
	if c.JobThreads < 0 {
		c.JobThreads = 0
	}
	if c.MaxFramesInFlight <= 0 {
		c.MaxFramesInFlight = 1
	}
	if c.MaxBodyBytes <= 0 {
		c.MaxBodyBytes = 256 << 20
	}
	if c.MaxPoints <= 0 {
		c.MaxPoints = 1_000_000
	}
	if c.MaxMemory == 0 {
		c.MaxMemory = DefaultMaxMemory()
	}
	if c.MinFreeBytes <= 0 {
		c.MinFreeBytes = 256 << 20
	}
	if c.ReserveBytes == 0 {
		c.ReserveBytes = 8 << 20
	}
	def := func(d *time.Duration, v time.Duration) {
		if *d <= 0 {
			*d = v
		}
	}
	def(&c.ReadHeaderTimeout, 10*time.Second)
	def(&c.ReadTimeout, 2*time.Minute)
	def(&c.WriteTimeout, 2*time.Minute)
	def(&c.IdleTimeout, 2*time.Minute)
	def(&c.MemoryWait, 10*time.Second)
	def(&c.BodyRateGrace, 10*time.Second)
	if c.MinBodyRate == 0 {
		c.MinBodyRate = 16 << 10
	}
	if c.RateLimit > 0 && c.RateBurst < 1 {
		c.RateBurst = max(1, 2*c.RateLimit)
	}
}

// Validate reports every problem with the configuration at once.
func (c *Config) Validate() error {
	var errs []error
	if c.Backend == nil || c.Backend.Store == nil || c.Backend.Blobs == nil || c.Backend.Queue == nil || c.Backend.Audit == nil {
		errs = append(errs, errors.New("config: Backend with Store, Blobs, Queue and Audit is required"))
	}
	if c.Analyzer == nil {
		errs = append(errs, errors.New("config: Analyzer is required"))
	}
	if c.MaxQueuedPerPrincipal < 0 || c.RateLimit < 0 || c.RateBurst < 0 {
		errs = append(errs, errors.New("config: MaxQueuedPerPrincipal, RateLimit and RateBurst must not be negative; 0 turns a limit off"))
	}
	if c.Retention < 0 {
		errs = append(errs, fmt.Errorf("config: Retention is %v; use 0 (keep everything) or a positive duration", c.Retention))
	}
	for i, t := range c.Tokens {
		if len(t) < 16 {
			errs = append(errs, fmt.Errorf("config: token %d is %d characters; use at least 16 random characters", i+1, len(t)))
		}
	}
	return errors.Join(errs...)
}

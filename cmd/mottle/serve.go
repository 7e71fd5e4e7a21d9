package main

import (
	"context"
	"fmt"
	"log/slog"
	"net"
	"os"
	"runtime"
	"strings"
	"time"

	"github.com/mottledic/mottle/pkg/demo"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/access"
	"github.com/mottledic/mottle/pkg/service/natsjs"
	"github.com/mottledic/mottle/web"
)

// runServe runs the HTTP service and the browser preview until SIGINT or
// SIGTERM, then shuts down gracefully.
func runServe(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "serve", "[flags]",
		"Run the Mottle HTTP service (API under /v1, see /v1/openapi.json) and the browser preview at /.\n"+
			"Jobs and results are kept in the data directory and survive a restart.\n\n"+
			"Environment: MOTTLE_TOKENS holds comma-separated bearer tokens with every role (or use --token-file,\n"+
			"written by mottle token, for principals with roles in projects); with tokens set, every route but\n"+
			"/healthz, /readyz and the preview's static files needs one. Without tokens a non-loopback address\n"+
			"is refused unless --insecure-open is given.")
	addr := fs.String("addr", "127.0.0.1:8080", "listen address (host:port)")
	data := fs.String("data", envOr("MOTTLE_DATA", "mottle-data"), "data directory for the job database, images and results (env MOTTLE_DATA)")
	backend := fs.String("backend", "embedded", backendHelp+" (with nats://, jobs are computed only when --workers is given)")
	workers := fs.Int("workers", runtime.NumCPU(), "jobs computed at once")
	stateJSON := fs.Bool("state-json", false, "store each series state as JSON, readable by workers from before the binary state, instead of the binary form: set it on the new nodes of a cluster while workers of an earlier version still run (a rolling upgrade); either form is read")
	inFlight := fs.Int("frames-in-flight", 1, "frames of one series computed at once, across all workers: with more than 1, frames of a direct-mode series are correlated side by side, each from the nearest finished frame's solution, and added to the series in order (curve within 2e-3 px and 2e-5 strain of the one-at-a-time run); 1 = one at a time, each from the previous frame")
	queue := fs.Int("queue", 64, "jobs that may wait for a worker; more are answered 429 with Retry-After")
	maxBody := fs.Int64("max-body-mb", 256, "largest request body, MiB")
	maxPixels := fs.Int64("max-pixels", imageio.DefaultMaxPixels, "largest image, pixels (checked from the header before decoding)")
	maxPoints := fs.Int("max-points", 1_000_000, "largest number of grid points of one job")
	jobTimeout := fs.Duration("job-timeout", 30*time.Minute, "longest compute time of one job")
	readTimeout := fs.Duration("read-timeout", 2*time.Minute, "longest time to read a request")
	writeTimeout := fs.Duration("write-timeout", 2*time.Minute, "longest time to write a response (event streams and waits are exempt)")
	grace := fs.Duration("shutdown-grace", 30*time.Second, "on SIGTERM, how long running jobs may finish before they are put back in the queue")
	retention := fs.Duration("retention", 0, "remove finished analyses and idle series after this long, e.g. 168h (0 keeps everything)")
	tokenFile := fs.String("token-file", envOr("MOTTLE_TOKEN_FILE", ""), "token file written by mottle token (principals with roles in projects; reread when it changes), or the older form with one plain token a line (env MOTTLE_TOKEN_FILE)")
	open := fs.Bool("insecure-open", false, "serve a non-loopback address without tokens: anyone who reaches it may read, submit and delete everything")
	maxQueued := fs.Int("principal-queued", 0, "jobs one principal may have waiting (0 = no limit beyond --queue); with tokens only")
	rate := fs.Float64("principal-rate", 0, "requests a second one principal may send, bursts of twice that (0 = no limit); with tokens only")
	cors := fs.String("cors", "", "comma-separated origins allowed to call the API from a browser (\"*\" for any); empty = no CORS")
	noUI := fs.Bool("no-ui", false, "do not serve the browser preview")
	maxMem := fs.Int64("max-memory-mb", 0, "memory budget of uploads being decoded and jobs being computed, MiB; beyond it jobs wait and uploads wait --memory-wait, then get 503 (0 = 3/4 of GOMEMLIMIT if set, else half the machine's memory; -1 = no budget)")
	memWait := fs.Duration("memory-wait", 10*time.Second, "how long an upload waits for memory before it is answered 503 with Retry-After")
	minRate := fs.Int64("min-upload-rate", 16, "slowest a request body may arrive after its first 10 s, KiB/s; slower ones are cut off with 408 (-1 = no minimum)")
	minFree := fs.Int64("min-free-mb", 256, "free space of the data directory, MiB, below which new uploads are answered 507 and /readyz is not ready (embedded backend)")
	if err := parseFlags(e, fs, args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		fmt.Fprintf(e.stderr, "mottle serve: unexpected arguments %q\n", fs.Args())
		return errUsage
	}
	tokens, tf, err := loadTokens(os.Getenv("MOTTLE_TOKENS"), *tokenFile)
	if err != nil {
		return err
	}
	log := slog.New(slog.NewJSONHandler(e.stderr, nil))
	be, err := openBackend(ctx, log, *backend, *data, *queue, !natsjs.IsURL(*backend) || flagGiven(fs, "workers"))
	if err != nil {
		return err
	}
	defer be.Close()
	cfg := service.Config{
		Backend: be, Analyzer: service.Pipeline{}, Logger: log,
		Workers: *workers, MaxFramesInFlight: *inFlight, StateJSON: *stateJSON, MaxBodyBytes: *maxBody << 20, MaxPixels: *maxPixels, MaxPoints: *maxPoints,
		JobTimeout: *jobTimeout, ReadTimeout: *readTimeout, WriteTimeout: *writeTimeout,
		ShutdownGrace: *grace, Retention: *retention, Tokens: tokens, TokenFile: tf, Demo: demo.Pair,
		MaxQueuedPerPrincipal: *maxQueued, RateLimit: *rate,
		MaxMemory: *maxMem << 20, MemoryWait: *memWait, MinBodyRate: *minRate << 10,
	}
	if !natsjs.IsURL(*backend) {
		cfg.DataDir, cfg.MinFreeBytes = *data, *minFree<<20
	}
	if *cors != "" {
		for _, o := range strings.Split(*cors, ",") {
			if o = strings.TrimSpace(o); o != "" {
				cfg.CORSOrigins = append(cfg.CORSOrigins, o)
			}
		}
	}
	if !*noUI {
		cfg.UI = web.Assets()
	}
	srv, err := service.New(cfg)
	if err != nil {
		return err
	}
	ln, err := net.Listen("tcp", *addr)
	if err != nil {
		return fmt.Errorf("listen on %s: %w", *addr, err)
	}
	who := "tokens required"
	if len(tokens) == 0 && tf == nil {
		who = "no tokens: one implicit principal with every role"
		if !isLoopback(ln.Addr()) {
			if !*open {
				ln.Close()
				return usageError{fmt.Errorf("refusing to serve %s without tokens: anyone who reaches it could read, submit and delete everything; create tokens with mottle token add and pass --token-file, or pass --insecure-open to serve it open anyway", ln.Addr())}
			}
			who = "OPEN TO EVERYONE WHO REACHES IT (--insecure-open, no tokens)"
			log.Warn("serving without bearer tokens on a non-loopback address (--insecure-open)")
		}
	}
	where := "data in " + *data
	if natsjs.IsURL(*backend) {
		where = "jobs and results on NATS " + redactURL(*backend)
	}
	fmt.Fprintf(e.stderr, "mottle serve: listening on http://%s (%s; %s)\n", ln.Addr(), where, who)
	return srv.Serve(ctx, ln)
}

func envOr(name, def string) string {
	if v := os.Getenv(name); v != "" {
		return v
	}
	return def
}

// loadTokens collects plain bearer tokens from a comma-separated list,
// and reads the token file: one written by mottle token (JSON lines), or
// the older form with one plain token a line.
func loadTokens(list, file string) ([]string, *access.File, error) {
	var out []string
	for _, t := range strings.Split(list, ",") {
		if t = strings.TrimSpace(t); t != "" {
			out = append(out, t)
		}
	}
	if file == "" {
		return out, nil, nil
	}
	b, err := os.ReadFile(file)
	if err != nil {
		return nil, nil, fmt.Errorf("--token-file: %w", err)
	}
	var plain []string
	for _, line := range strings.Split(string(b), "\n") {
		if line = strings.TrimSpace(line); line != "" && !strings.HasPrefix(line, "#") {
			if strings.HasPrefix(line, "{") {
				tf, err := access.OpenFile(file)
				if err != nil {
					return nil, nil, fmt.Errorf("--token-file: %w", err)
				}
				return out, tf, nil
			}
			plain = append(plain, line)
		}
	}
	if len(plain) == 0 {
		// An empty file of mottle token: every token revoked, or none yet.
		tf, err := access.OpenFile(file)
		if err != nil {
			return nil, nil, fmt.Errorf("--token-file: %w", err)
		}
		return out, tf, nil
	}
	return append(out, plain...), nil, nil
}

func isLoopback(a net.Addr) bool {
	tcp, ok := a.(*net.TCPAddr)
	return ok && tcp.IP.IsLoopback()
}

// redactURL drops user names and passwords from the servers of a backend
// URL, so that a log line does not carry credentials.
func redactURL(spec string) string {
	base, _, _ := strings.Cut(spec, "?")
	parts := strings.Split(base, ",")
	for i, p := range parts {
		scheme, rest, ok := strings.Cut(p, "://")
		if !ok {
			scheme, rest = "", p
		}
		if at := strings.LastIndex(rest, "@"); at >= 0 {
			rest = rest[at+1:]
		}
		if scheme != "" {
			rest = scheme + "://" + rest
		}
		parts[i] = rest
	}
	return strings.Join(parts, ",")
}

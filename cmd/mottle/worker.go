package main

import (
	"context"
	"flag"
	"fmt"
	"log/slog"
	"runtime"
	"time"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/runner"
	"github.com/mottledic/mottle/pkg/service/embedded"
	"github.com/mottledic/mottle/pkg/service/jobs"
	"github.com/mottledic/mottle/pkg/service/natsjs"
)

// backendHelp describes the --backend values of serve and worker.
const backendHelp = "job backend: embedded (bbolt and files in --data), or nats://host:4222[,nats://host2:4222…][?prefix=mottle&replicas=3&ack_wait=30s&max_deliver=10&queue=64&order=none&creds=file] for NATS JetStream shared with mottle worker processes"

// runWorker computes jobs from a NATS JetStream backend until SIGINT or
// SIGTERM, then lets running jobs finish (up to --shutdown-grace) and puts
// the rest back in the queue.
func runWorker(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "worker", "--backend nats://host:4222[,…] [flags]",
		"Pull analysis and frame jobs from a NATS JetStream cluster shared with \"mottle serve --backend nats://…\",\n"+
			"compute them, store the results and acknowledge them. Run any number of workers on any number of machines;\n"+
			"a worker that dies has its job delivered to another after the acknowledgement deadline (ack_wait).")
	backend := fs.String("backend", envOr("MOTTLE_BACKEND", ""), "NATS servers and options, as for mottle serve --backend (env MOTTLE_BACKEND)")
	workers := fs.Int("workers", runtime.NumCPU(), "jobs computed at once")
	stateJSON := fs.Bool("state-json", false, "store each series state as JSON, readable by workers from before the binary state, instead of the binary form: set it on the new nodes of a cluster while workers of an earlier version still run (a rolling upgrade); either form is read")
	threads := fs.Int("threads", 0, "threads each job uses; 0 = 1, and an analysis that starts while fewer jobs run than there are cores also takes the idle ones, as in mottle serve (results never depend on it)")
	jobTimeout := fs.Duration("job-timeout", 30*time.Minute, "longest compute time of one job")
	grace := fs.Duration("shutdown-grace", 30*time.Second, "on SIGTERM, how long running jobs may finish before they are put back in the queue")
	maxPixels := fs.Int64("max-pixels", imageio.DefaultMaxPixels, "largest image to decode, pixels")
	maxBody := fs.Int64("max-body-mb", 256, "largest stored image, MiB")
	if err := parseFlags(e, fs, args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		fmt.Fprintf(e.stderr, "mottle worker: unexpected arguments %q\n", fs.Args())
		return errUsage
	}
	if !natsjs.IsURL(*backend) {
		fmt.Fprintf(e.stderr, "mottle worker: --backend %q: give the NATS servers, e.g. --backend nats://127.0.0.1:4222\n", *backend)
		return errUsage
	}
	if *workers < 1 || *threads < 0 {
		fmt.Fprintf(e.stderr, "mottle worker: --workers %d, --threads %d: use at least 1 worker and 0 (idle cores) or more threads\n", *workers, *threads)
		return errUsage
	}
	log := slog.New(slog.NewJSONHandler(e.stderr, nil))
	be, err := openBackend(ctx, log, *backend, "", 0, true)
	if err != nil {
		return err
	}
	defer be.Close()
	run, err := runner.New(runner.Config{
		Backend: be, Analyzer: runner.Pipeline{}, Logger: log,
		Workers: *workers, JobThreads: *threads, JobTimeout: *jobTimeout, ShutdownGrace: *grace,
		MaxPixels: *maxPixels, MaxBytes: *maxBody << 20, StateJSON: *stateJSON,
	})
	if err != nil {
		return err
	}
	stop, err := run.Start(ctx)
	if err != nil {
		return err
	}
	fmt.Fprintf(e.stderr, "mottle worker: computing up to %d jobs at once from %s\n", *workers, redactURL(*backend))
	<-ctx.Done()
	log.Info("worker stopping")
	stop()
	return nil
}

// openBackend opens the job backend named by spec for serve and worker:
// "embedded" (or "") opens the bbolt-and-files backend in dataDir with a
// queue of queueCap; a nats:// URL opens the JetStream backend (see
// natsjs.ParseURL), whose queue capacity is taken from queueCap unless the
// URL sets queue=. work says whether this process computes jobs: an API
// node started without an explicit --workers leaves them to the workers.
func openBackend(ctx context.Context, log *slog.Logger, spec, dataDir string, queueCap int, work bool) (*jobs.Backend, error) {
	if spec == "" || spec == "embedded" {
		return embedded.Open(dataDir, queueCap)
	}
	if !natsjs.IsURL(spec) {
		return nil, fmt.Errorf("--backend %q: use embedded or nats://host:4222[,nats://host2:4222…]", spec)
	}
	o, err := natsjs.ParseURL(spec)
	if err != nil {
		return nil, fmt.Errorf("--backend: %w", err)
	}
	if o.QueueCap == 0 {
		o.QueueCap = queueCap
	}
	o.Work, o.Logger = work, log
	octx, cancel := context.WithTimeout(ctx, time.Minute)
	defer cancel()
	b, err := natsjs.Open(octx, o)
	if err != nil {
		return nil, err
	}
	return b.Jobs(), nil
}

// flagGiven reports whether the flag name was set on the command line.
func flagGiven(fs *flag.FlagSet, name string) bool {
	given := false
	fs.Visit(func(f *flag.Flag) { given = given || f.Name == name })
	return given
}

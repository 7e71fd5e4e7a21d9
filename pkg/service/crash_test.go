package service_test

import (
	"context"
	"fmt"
	"log/slog"
	"net"
	"os"
	"os/exec"
	"os/signal"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/access"
	"github.com/mottledic/mottle/pkg/service/embedded"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// TestMain lets the test binary act as a server process for the crash
// tests: with MOTTLE_TEST_SERVER set it serves on 127.0.0.1 from the data
// directory in MOTTLE_TEST_DIR until SIGTERM, instead of running tests.
func TestMain(m *testing.M) {
	if os.Getenv("MOTTLE_TEST_SERVER") == "1" {
		if err := serveForTest(); err != nil {
			fmt.Fprintln(os.Stderr, "test server:", err)
			os.Exit(1)
		}
		os.Exit(0)
	}
	os.Exit(m.Run())
}

func serveForTest() error {
	dir := os.Getenv("MOTTLE_TEST_DIR")
	grace, _ := time.ParseDuration(os.Getenv("MOTTLE_TEST_GRACE"))
	be, err := embedded.Open(dir, 64)
	if err != nil {
		return err
	}
	defer be.Close()
	var an service.Analyzer = &fakeAnalyzer{}
	if os.Getenv("MOTTLE_TEST_ANALYZER") == "pipeline" {
		an = service.Pipeline{}
	}
	var hold func(context.Context, jobs.Job)
	if os.Getenv("MOTTLE_TEST_HOLD") == "1" {
		// Every job stays running until the process is killed or its
		// shutdown grace is over.
		hold = func(ctx context.Context, _ jobs.Job) { <-ctx.Done() }
	}
	cfg := service.Config{Backend: be, Analyzer: an, Workers: 2, BeforeCompute: hold,
		ShutdownGrace: grace, Logger: slog.New(slog.NewJSONHandler(os.Stderr, nil))}
	if path := os.Getenv("MOTTLE_TEST_TOKENS"); path != "" {
		// The token file of an access test.
		if cfg.TokenFile, err = access.OpenFile(path); err != nil {
			return err
		}
	}
	if err := limitsFromEnv(&cfg); err != nil {
		return err
	}
	s, err := service.New(cfg)
	if err != nil {
		return err
	}
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return err
	}
	tmp := filepath.Join(dir, "addr.tmp")
	if err := os.WriteFile(tmp, []byte(ln.Addr().String()), 0o600); err != nil {
		return err
	}
	if err := os.Rename(tmp, filepath.Join(dir, "addr")); err != nil {
		return err
	}
	ctx, stop := signal.NotifyContext(context.Background(), syscall.SIGTERM)
	defer stop()
	return s.Serve(ctx, ln)
}

// proc is a server subprocess.
type proc struct {
	cmd  *exec.Cmd
	ts   *testServer
	done chan error
	log  string // its log file
}

// startProc starts a server subprocess on dir; with hold, every job it
// starts stays running until the process is killed or its shutdown grace
// is over. env adds variables (see limitsFromEnv).
func startProc(t *testing.T, dir string, hold bool, grace time.Duration, env ...string) *proc {
	t.Helper()
	os.Remove(filepath.Join(dir, "addr"))
	cmd := exec.Command(os.Args[0], "-test.run=^$")
	cmd.Env = append(os.Environ(), "MOTTLE_TEST_SERVER=1", "MOTTLE_TEST_DIR="+dir, "MOTTLE_TEST_GRACE="+grace.String())
	if hold {
		cmd.Env = append(cmd.Env, "MOTTLE_TEST_HOLD=1")
	}
	cmd.Env = append(cmd.Env, env...)
	logName := filepath.Join(dir, "log-"+strconv.FormatInt(time.Now().UnixNano(), 10))
	logf, err := os.Create(logName)
	if err != nil {
		t.Fatal(err)
	}
	cmd.Stderr = logf
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	p := &proc{cmd: cmd, done: make(chan error, 1), log: logName}
	go func() { p.done <- cmd.Wait(); logf.Close() }()
	t.Cleanup(func() {
		cmd.Process.Kill()
		<-p.done
	})
	ctx := testCtx(t)
	for {
		b, err := os.ReadFile(filepath.Join(dir, "addr"))
		if err == nil {
			p.ts = &testServer{}
			p.ts.Server = newClientOnly("http://" + string(b))
			return p
		}
		select {
		case err := <-p.done:
			t.Fatalf("server exited at start: %v", err)
		case <-ctx.Done():
			t.Fatal("server did not start")
		case <-time.After(20 * time.Millisecond):
		}
	}
}

// TestSIGKILLRecovery kills the server with jobs queued and running (two
// held running by the test hook), starts it again on the same data
// directory, and checks that all of them complete with the right results.
func TestSIGKILLRecovery(t *testing.T) {
	dir := t.TempDir()
	p := startProc(t, dir, true, time.Second)
	type sub struct {
		id     string
		dx, dy int
	}
	var subs []sub
	for i := 0; i < 6; i++ {
		dx, dy := i%3-1, i%2
		ref, def := pair(t, 32, 32, dx, dy, uint64(40+i))
		ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 15}`)...)
		resp, b := p.ts.do(t, "POST", "/v1/analyses", ct, body)
		if resp.StatusCode != 202 {
			t.Fatalf("POST: %d %s", resp.StatusCode, b)
		}
		subs = append(subs, sub{decodeJSON[jobDoc](t, b).ID, dx, dy})
	}
	// Wait until both workers hold a job, then kill.
	poll(t, "two jobs running", func() bool {
		_, b := p.ts.do(t, "GET", "/v1/analyses?state=running", "", nil)
		return strings.Count(string(b), `"state": "running"`) == 2
	})
	if err := p.cmd.Process.Signal(syscall.SIGKILL); err != nil {
		t.Fatal(err)
	}
	if err := <-p.done; err == nil || !strings.Contains(err.Error(), "killed") {
		t.Fatalf("server exit: %v, want killed", err)
	}
	p.done <- nil // for the cleanup

	p2 := startProc(t, dir, false, time.Second)
	running := 0
	for _, s := range subs {
		j := p2.ts.waitDone(t, "/v1/analyses/"+s.id)
		if j.State != "succeeded" || j.Summary.Mean["u"] != float64(s.dx) || j.Summary.Mean["v"] != float64(s.dy) {
			t.Errorf("job %s after restart: %s %+v, want u=%d v=%d", s.id, j.State, j.Summary, s.dx, s.dy)
		}
		_, b := p2.ts.do(t, "GET", "/v1/analyses/"+s.id, "", nil)
		if strings.Contains(string(b), `"attempts": 2`) {
			running++
		}
	}
	if running != 2 {
		t.Errorf("%d jobs were started twice, want the 2 that were running at the kill", running)
	}
	_, b := p2.ts.do(t, "GET", "/metrics", "", nil)
	if !strings.Contains(string(b), "mottle_jobs_recovered_total 6") {
		t.Errorf("metrics do not show 6 recovered jobs:\n%s", b)
	}
}

// TestSIGTERMRequeues stops the server gracefully while jobs are held
// running past the shutdown grace (they would never end by themselves):
// it exits cleanly, which it can only do by stopping them when the grace
// is over, the interrupted jobs go back in the queue, and a restart
// completes them.
func TestSIGTERMRequeues(t *testing.T) {
	dir := t.TempDir()
	p := startProc(t, dir, true, 300*time.Millisecond)
	var ids []string
	for i := 0; i < 3; i++ {
		ref, def := pair(t, 32, 32, 1, -1, uint64(60+i))
		ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 15}`)...)
		resp, b := p.ts.do(t, "POST", "/v1/analyses", ct, body)
		if resp.StatusCode != 202 {
			t.Fatalf("POST: %d %s", resp.StatusCode, b)
		}
		ids = append(ids, decodeJSON[jobDoc](t, b).ID)
	}
	p.ts.waitState(t, "/v1/analyses/"+ids[0], "running")
	p.cmd.Process.Signal(syscall.SIGTERM)
	select {
	case err := <-p.done:
		if err != nil {
			t.Fatalf("server exit after SIGTERM: %v", err)
		}
		p.done <- nil
	case <-testCtx(t).Done():
		t.Fatal("server did not stop after SIGTERM: held jobs were not stopped at the end of the grace")
	}
	log, err := os.ReadFile(p.log)
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"shutdown grace over", "job interrupted by shutdown"} {
		if !strings.Contains(string(log), want) {
			t.Errorf("server log lacks %q:\n%s", want, log)
		}
	}
	p2 := startProc(t, dir, false, time.Second)
	for _, id := range ids {
		j := p2.ts.waitDone(t, "/v1/analyses/"+id)
		if j.State != "succeeded" || j.Summary.Mean["u"] != 1 {
			t.Errorf("job %s: %s %+v", id, j.State, j.Summary)
		}
	}
	// An interruption by shutdown does not count as an attempt.
	_, b := p2.ts.do(t, "GET", "/v1/analyses/"+ids[0], "", nil)
	if !strings.Contains(string(b), `"attempts": 1`) {
		t.Errorf("interrupted job: %s, want attempts 1", b)
	}
}

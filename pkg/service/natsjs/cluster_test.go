package natsjs

// The cluster test runs everything as real processes: three JetStream
// nodes (this test binary re-executed as a NATS server), one API node
// (mottle serve --backend nats://…) and workers, all on 127.0.0.1: two
// that hold the first attempt of an analysis until they are killed (this
// test binary re-executed as a worker with service.Config.BeforeCompute
// set), and one mottle worker. The mottle binary is built from
// ./cmd/mottle once per run.

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"mime/multipart"
	"net"
	"net/http"
	"net/http/httptest"
	"net/textproto"
	"os"
	"os/exec"
	"os/signal"
	"path/filepath"
	"reflect"
	"runtime"
	"sort"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/embedded"
	"github.com/mottledic/mottle/pkg/service/jobs"
	"github.com/mottledic/mottle/pkg/synth"
)

// nodeEnv holds the JSON configuration of a NATS node process; workerEnv
// the backend URL of a holding worker process.
const (
	nodeEnv   = "NATSJS_TEST_NODE"
	workerEnv = "NATSJS_TEST_WORKER"
	// holdFramesEnv set to 1 makes a holding worker hold the first
	// attempt of frames too.
	holdFramesEnv = "NATSJS_TEST_HOLD_FRAMES"
)

type nodeConfig struct {
	Name        string `json:"name"`
	Port        int    `json:"port"`
	ClusterPort int    `json:"cluster_port"`
	Routes      string `json:"routes"`
	Dir         string `json:"dir"`
	// Profile, when set, is the file the node writes its CPU profile to
	// on SIGUSR1 (runtime/pprof; for benchmarks, see profileEnv).
	Profile string `json:"profile,omitempty"`
}

func TestMain(m *testing.M) {
	if cfg := os.Getenv(nodeEnv); cfg != "" {
		os.Exit(runNode(cfg))
	}
	if url := os.Getenv(workerEnv); url != "" {
		os.Exit(runHoldingWorker(url))
	}
	os.Exit(m.Run())
}

// runHoldingWorker computes jobs from the backend at url, one at a time,
// as mottle worker does, until SIGTERM, except that it holds the first
// attempt of an analysis running until the process is killed: the test
// kills it with that job certainly in the middle, whatever the speed of
// the machine.
func runHoldingWorker(url string) int {
	o, err := ParseURL(url)
	if err != nil {
		fmt.Fprintln(os.Stderr, "worker:", err)
		return 2
	}
	log := slog.New(slog.NewJSONHandler(os.Stderr, nil))
	o.Work, o.Logger = true, log
	ctx, stop := signal.NotifyContext(context.Background(), syscall.SIGTERM, os.Interrupt)
	defer stop()
	octx, cancel := context.WithTimeout(ctx, time.Minute)
	b, err := Open(octx, o)
	cancel()
	if err != nil {
		fmt.Fprintln(os.Stderr, "worker:", err)
		return 1
	}
	defer b.Close()
	holdFrames := os.Getenv(holdFramesEnv) == "1"
	hold := func(ctx context.Context, j jobs.Job) {
		if (j.Kind == jobs.Analysis || holdFrames && j.Kind == jobs.Frame) && j.Attempts == 1 {
			<-ctx.Done()
		}
	}
	srv, err := service.New(service.Config{Backend: b.Jobs(), Analyzer: service.Pipeline{}, Logger: log,
		Workers: 1, BeforeCompute: hold})
	if err != nil {
		fmt.Fprintln(os.Stderr, "worker:", err)
		return 1
	}
	stopWork, err := srv.Start(ctx)
	if err != nil {
		fmt.Fprintln(os.Stderr, "worker:", err)
		return 1
	}
	fmt.Fprintln(os.Stderr, "holding worker: computing up to 1 jobs at once")
	<-ctx.Done()
	stopWork()
	return 0
}

// runNode runs one NATS server with JetStream in a cluster until SIGTERM.
func runNode(cfg string) int {
	var c nodeConfig
	if err := json.Unmarshal([]byte(cfg), &c); err != nil {
		fmt.Fprintln(os.Stderr, "node config:", err)
		return 2
	}
	opts := &server.Options{ServerName: c.Name, Host: "127.0.0.1", Port: c.Port, JetStream: true, StoreDir: c.Dir,
		NoSigs: true, NoLog: true}
	if c.ClusterPort != 0 {
		opts.Cluster = server.ClusterOpts{Name: "mottle-test", Host: "127.0.0.1", Port: c.ClusterPort}
		opts.Routes = server.RoutesFromStr(c.Routes)
	}
	if c.Profile != "" {
		stop, err := profileUntilUSR1(c.Profile)
		if err != nil {
			fmt.Fprintln(os.Stderr, "node:", err)
			return 1
		}
		defer stop()
	}
	s, err := server.NewServer(opts)
	if err != nil {
		fmt.Fprintln(os.Stderr, "node:", err)
		return 1
	}
	sig := make(chan os.Signal, 1)
	signal.Notify(sig, syscall.SIGTERM, os.Interrupt)
	go s.Start()
	// The test process gives up waiting for "ready" at its own deadline.
	if !s.ReadyForConnections(10 * time.Minute) {
		fmt.Fprintln(os.Stderr, "node not ready")
		return 1
	}
	fmt.Println("ready")
	<-sig
	s.Shutdown()
	s.WaitForShutdown()
	return 0
}

// freePorts returns n distinct free TCP ports on 127.0.0.1.
func freePorts(t testing.TB, n int) []int {
	t.Helper()
	var ls []net.Listener
	var ports []int
	for i := 0; i < n; i++ {
		l, err := net.Listen("tcp", "127.0.0.1:0")
		if err != nil {
			t.Fatal(err)
		}
		ls = append(ls, l)
		ports = append(ports, l.Addr().(*net.TCPAddr).Port)
	}
	for _, l := range ls {
		l.Close()
	}
	return ports
}

// syncBuffer is a bytes.Buffer safe for a process writing and a test
// reading.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

// proc is a child process with its output.
type proc struct {
	name string
	cmd  *exec.Cmd
	out  *syncBuffer
	done chan struct{}
}

func startProc(t testing.TB, name string, env []string, bin string, args ...string) *proc {
	t.Helper()
	p := &proc{name: name, out: &syncBuffer{}, done: make(chan struct{})}
	p.cmd = exec.Command(bin, args...)
	p.cmd.Env = append(os.Environ(), env...)
	p.cmd.Stdout, p.cmd.Stderr = p.out, p.out
	if err := p.cmd.Start(); err != nil {
		t.Fatalf("start %s: %v", name, err)
	}
	go func() { p.cmd.Wait(); close(p.done) }()
	t.Cleanup(func() {
		p.signal(syscall.SIGKILL)
		<-p.done
		if t.Failed() {
			f, err := os.CreateTemp("", "natsjs-"+name+"-*.log")
			if err == nil {
				f.WriteString(p.out.String())
				f.Close()
			}
			t.Logf("--- output of %s in %s, last 1500 bytes:\n%s", name, f.Name(), tail(p.out.String(), 1500))
		}
	})
	return p
}

func (p *proc) signal(s os.Signal) {
	select {
	case <-p.done:
	default:
		p.cmd.Process.Signal(s)
	}
}

func tail(s string, n int) string {
	if len(s) > n {
		return s[len(s)-n:]
	}
	return s
}

// testCtx returns a context that ends a little before the test binary's
// -timeout would stop it (after 10 minutes when there is none). Tests
// wait for events, never for a time: this bound only turns a hang into a
// failure with a message, and is never reached because the machine is
// slow.
func testCtx(t testing.TB) context.Context {
	end := time.Now().Add(10 * time.Minute)
	if dt, ok := t.(interface{ Deadline() (time.Time, bool) }); ok {
		if d, ok := dt.Deadline(); ok {
			end = d.Add(-time.Until(d) / 20) // leave time to report
		}
	}
	ctx, cancel := context.WithDeadline(context.Background(), end)
	t.Cleanup(cancel)
	return ctx
}

// untilEnd is the time left until testCtx ends.
func untilEnd(t testing.TB) time.Duration {
	d, _ := testCtx(t).Deadline()
	return time.Until(d)
}

// waitFor checks cond every 20 ms until it holds; it fails the test only
// when testCtx ends.
func waitFor(t testing.TB, what string, cond func() bool) {
	t.Helper()
	ctx := testCtx(t)
	for !cond() {
		select {
		case <-ctx.Done():
			t.Fatalf("gave up waiting for %s at the end of the test's time", what)
		case <-time.After(20 * time.Millisecond):
		}
	}
}

var buildOnce struct {
	sync.Once
	bin string
	err error
}

// mottleBinary builds cmd/mottle once per test run.
func mottleBinary(t testing.TB) string {
	t.Helper()
	buildOnce.Do(func() {
		dir, err := os.MkdirTemp("", "natsjs-mottle-")
		if err != nil {
			buildOnce.err = err
			return
		}
		gobin := filepath.Join(runtime.GOROOT(), "bin", "go")
		if _, err := os.Stat(gobin); err != nil {
			gobin = "go"
		}
		bin := filepath.Join(dir, "mottle")
		cmd := exec.Command(gobin, "build", "-o", bin, "github.com/mottledic/mottle/cmd/mottle")
		if out, err := cmd.CombinedOutput(); err != nil {
			buildOnce.err = fmt.Errorf("go build cmd/mottle: %v\n%s", err, out)
			return
		}
		buildOnce.bin = bin
	})
	if buildOnce.err != nil {
		t.Fatal(buildOnce.err)
	}
	return buildOnce.bin
}

// cluster is a running three-node JetStream cluster (or, from
// startNodes(t, 1, ""), a single server).
type cluster struct {
	nodes []*proc
	urls  []string
}

func (c *cluster) url(query string) string {
	u := strings.Join(c.urls, ",")
	if query != "" {
		u += "?" + query
	}
	return u
}

func startCluster(t testing.TB) *cluster { return startNodes(t, 3, "") }

// startNodes starts n NATS servers with JetStream: a cluster of n, or
// one server outside any cluster when n is 1 (its streams get one
// replica). With profile set, node i writes its CPU profile to
// profile+"-n<i>.pprof" on SIGUSR1 (see stopProfiles).
func startNodes(t testing.TB, n int, profile string) *cluster {
	t.Helper()
	ports := freePorts(t, 2*n)
	c := &cluster{}
	var routes []string
	for i := 0; i < n; i++ {
		routes = append(routes, fmt.Sprintf("nats://127.0.0.1:%d", ports[n+i]))
		c.urls = append(c.urls, fmt.Sprintf("nats://127.0.0.1:%d", ports[i]))
	}
	dir := t.TempDir()
	for i := 0; i < n; i++ {
		nc := nodeConfig{Name: fmt.Sprintf("n%d", i+1), Port: ports[i], Dir: filepath.Join(dir, fmt.Sprintf("n%d", i+1))}
		if n > 1 {
			nc.ClusterPort, nc.Routes = ports[n+i], strings.Join(routes, ",")
		}
		if profile != "" {
			nc.Profile = fmt.Sprintf("%s-n%d.pprof", profile, i+1)
		}
		cfg, _ := json.Marshal(nc)
		c.nodes = append(c.nodes, startProc(t, fmt.Sprintf("nats-n%d", i+1), []string{nodeEnv + "=" + string(cfg)},
			os.Args[0], "-test.run=^$"))
	}
	for _, n := range c.nodes {
		waitFor(t, n.name+" ready", func() bool {
			select {
			case <-n.done:
				// A node that exited (a cluster port taken between
				// freePorts and its listen, say) never gets ready: fail
				// now with its output rather than at the time limit.
				t.Fatalf("%s exited before it was ready:\n%s", n.name, tail(n.out.String(), 1500))
			default:
			}
			return strings.Contains(n.out.String(), "ready")
		})
	}
	return c
}

// scenario is the rendered test data: a series and one slower analysis.
type scenario struct {
	params    []byte // series parameters
	reference []byte
	frames    [][]byte
	slowRef   []byte // a larger pair analysed with a dense grid (its first attempt is held and killed)
	slowDef   []byte
	slowPar   []byte
}

func pngBytes(t testing.TB, g *imageio.Gray) []byte {
	var b bytes.Buffer
	if err := imageio.WritePNG(&b, g, 8); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// render draws an invented tensile coupon: n frames of a linear ramp to
// 2 % stretch along x with 0.6 % lateral contraction, w×w px.
func render(t testing.TB, n, w int) *scenario {
	t.Helper()
	full := synth.Affine{F: [2][2]float64{{1.02, 0}, {0, 0.994}}, CX: float64(w) / 2, CY: float64(w) / 2, U: 1.5, V: -0.5}
	frames, err := synth.LoadSeries(full, synth.Ramp(n), 0.5, 1000)
	if err != nil {
		t.Fatal(err)
	}
	pat, err := synth.NewPattern(synth.PatternOptions{Diameter: 4, Seed: 11, Bounds: synth.BoundsForSeries(frames, w, w, 10)})
	if err != nil {
		t.Fatal(err)
	}
	sc := &scenario{}
	ro := synth.RenderOptions{W: w, H: w, Bits: 8, Noise: 1, Seed: 5}
	ref, _, err := synth.Render(pat, synth.Identity{}, ro)
	if err != nil {
		t.Fatal(err)
	}
	sc.reference = pngBytes(t, ref)
	err = synth.RenderSeries(context.Background(), pat, frames[1:], ro, func(f synth.Frame, g *imageio.Gray, _ synth.Report) error {
		sc.frames = append(sc.frames, pngBytes(t, g))
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	sc.params = []byte(`{"subset":21,"step":10}`)
	sr, sd, err := synth.Pair(synth.PatternOptions{Diameter: 4, Seed: 3}, synth.Affine{F: [2][2]float64{{1.01, 0.002}, {0, 0.997}}, CX: 128, CY: 128, U: 0.7},
		synth.RenderOptions{W: 256, H: 256, Bits: 8, Noise: 1, Seed: 9})
	if err != nil {
		t.Fatal(err)
	}
	sc.slowRef, sc.slowDef = pngBytes(t, sr), pngBytes(t, sd)
	sc.slowPar = []byte(`{"subset":21,"step":3}`)
	return sc
}

// client talks to one mottle API.
type client struct {
	t    testing.TB
	base string
}

func (c client) do(req *http.Request, want int) []byte {
	c.t.Helper()
	res, err := http.DefaultClient.Do(req)
	if err != nil {
		c.t.Fatalf("%s %s: %v", req.Method, req.URL, err)
	}
	defer res.Body.Close()
	body, _ := io.ReadAll(res.Body)
	if res.StatusCode != want {
		c.t.Fatalf("%s %s: %s: %s", req.Method, req.URL, res.Status, body)
	}
	return body
}

func (c client) multipart(path string, parts map[string][]byte, want int) string {
	c.t.Helper()
	var b bytes.Buffer
	mw := multipart.NewWriter(&b)
	names := make([]string, 0, len(parts))
	for n := range parts {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		h := textproto.MIMEHeader{}
		if n == "params" {
			h.Set("Content-Disposition", `form-data; name="params"`)
			h.Set("Content-Type", "application/json")
		} else {
			h.Set("Content-Disposition", fmt.Sprintf(`form-data; name=%q; filename="%s.png"`, n, n))
			h.Set("Content-Type", "image/png")
		}
		w, _ := mw.CreatePart(h)
		w.Write(parts[n])
	}
	mw.Close()
	req, _ := http.NewRequest("POST", c.base+path, &b)
	req.Header.Set("Content-Type", mw.FormDataContentType())
	return idOf(c.t, c.do(req, want))
}

func (c client) frame(series string, img []byte, n int) string {
	c.t.Helper()
	req, _ := http.NewRequest("POST", fmt.Sprintf("%s/v1/series/%s/frames?wait=false&time=%g&load=%g", c.base, series, 0.5*float64(n+1), 25*float64(n+1)), bytes.NewReader(img))
	req.Header.Set("Content-Type", "image/png")
	return idOf(c.t, c.do(req, http.StatusAccepted))
}

func idOf(t testing.TB, body []byte) string {
	var v struct {
		ID string `json:"id"`
	}
	if err := json.Unmarshal(body, &v); err != nil || !jobs.ValidID(v.ID) {
		t.Fatalf("no id in answer %s", body)
	}
	return v.ID
}

// submission is what one run posted: the slow analysis and the series.
type submission struct {
	analysis, series string
}

// submit posts the slow analysis and the series to an API; between the
// two halves of the frames it calls mid (nil = nothing).
func submit(c client, sc *scenario, mid func()) submission {
	var s submission
	s.analysis = c.multipart("/v1/analyses", map[string][]byte{"reference": sc.slowRef, "deformed": sc.slowDef, "params": sc.slowPar}, http.StatusAccepted)
	s.series = c.multipart("/v1/series", map[string][]byte{"reference": sc.reference, "params": sc.params}, http.StatusCreated)
	for i, f := range sc.frames {
		if i == len(sc.frames)/2 && mid != nil {
			mid()
		}
		c.frame(s.series, f, i)
	}
	return s
}

// done reports whether every job of the submission has finished.
func done(ctx context.Context, st jobs.Store, s submission, frames int) bool {
	a, err := st.Job(ctx, s.analysis)
	if err != nil || !a.State.Terminal() {
		return false
	}
	sr, err := st.Series(ctx, s.series)
	if err != nil || len(sr.Frames) != frames {
		return false
	}
	for _, id := range sr.Frames {
		if j, err := st.Job(ctx, id); err != nil || !j.State.Terminal() {
			return false
		}
	}
	return true
}

// outcome is what a backend holds after a run, by job position: the
// analysis ("analysis") and each frame ("frame-NN"): record summary and
// result files (field.json without its creation time).
type outcome struct {
	jobs  map[string]*jobs.Job
	files map[string]map[string][]byte
	blobs map[string][]string // blob keys under each job, relative to the job
}

func collect(t testing.TB, be *jobs.Backend, keys func(prefix string) []string, s submission) *outcome {
	t.Helper()
	ctx := context.Background()
	o := &outcome{jobs: map[string]*jobs.Job{}, files: map[string]map[string][]byte{}, blobs: map[string][]string{}}
	sr, err := be.Store.Series(ctx, s.series)
	if err != nil {
		t.Fatal(err)
	}
	ids := map[string]string{"analysis": s.analysis}
	for i, id := range sr.Frames {
		ids[fmt.Sprintf("frame-%02d", i)] = id
	}
	for pos, id := range ids {
		j, err := be.Store.Job(ctx, id)
		if err != nil {
			t.Fatal(err)
		}
		o.jobs[pos] = j
		o.files[pos] = map[string][]byte{}
		for _, name := range j.Results {
			rc, err := be.Blobs.Get(ctx, jobs.ResultKey(id, name))
			if err != nil {
				t.Fatalf("%s result %s: %v", pos, name, err)
			}
			data, err := io.ReadAll(rc)
			rc.Close()
			if err != nil {
				t.Fatalf("%s result %s: %v", pos, name, err)
			}
			if name == "field.json" {
				data = withoutCreated(t, data)
			}
			if name == "field.npz" {
				// The stored result carries the same metadata as field.json.
				data = withoutCreated(t, npzAsJSON(t, data))
			}
			o.files[pos][name] = data
		}
		var rel []string
		for _, k := range keys(jobs.JobKey(id)) {
			rel = append(rel, strings.TrimPrefix(k, jobs.JobKey(id)+"/"))
		}
		sort.Strings(rel)
		o.blobs[pos] = rel
	}
	return o
}

// withoutCreated drops from field.json the parts that record when and how
// fast a run went (meta.created, meta.extra.elapsed_s and
// points_per_second), the only parts that differ between two runs.
func withoutCreated(t testing.TB, data []byte) []byte {
	var m map[string]any
	if err := json.Unmarshal(data, &m); err != nil {
		t.Fatalf("field.json: %v", err)
	}
	meta, ok := m["meta"].(map[string]any)
	if !ok {
		t.Fatal("field.json has no meta")
	}
	delete(meta, "created")
	if extra, ok := meta["extra"].(map[string]any); ok {
		delete(extra, "elapsed_s")
		delete(extra, "points_per_second")
	}
	out, _ := json.Marshal(m)
	return out
}

// npzAsJSON returns the field of a stored result (field.npz) as field.json.
func npzAsJSON(t testing.TB, data []byte) []byte {
	f, err := field.ReadNPZ(bytes.NewReader(data), int64(len(data)))
	if err != nil {
		t.Fatalf("field.npz: %v", err)
	}
	var b bytes.Buffer
	if err := field.WriteJSON(&b, f); err != nil {
		t.Fatalf("field.npz: %v", err)
	}
	return b.Bytes()
}

// embeddedRun computes the scenario on the default embedded backend in
// this process: the reference answer.
func embeddedRun(t testing.TB, sc *scenario) *outcome {
	t.Helper()
	dir := t.TempDir()
	be, err := embedded.Open(dir, 128)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { be.Close() })
	srv, err := service.New(service.Config{Backend: be, Analyzer: service.Pipeline{}, Workers: 2,
		Logger: discardLogger()})
	if err != nil {
		t.Fatal(err)
	}
	stop, err := srv.Start(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	defer stop()
	hs := httptest.NewServer(srv.Handler())
	defer hs.Close()
	s := submit(client{t, hs.URL}, sc, nil)
	waitFor(t, "embedded run", func() bool { return done(context.Background(), be.Store, s, len(sc.frames)) })
	keys := func(prefix string) []string {
		var out []string
		root := filepath.Join(dir, "blobs")
		filepath.Walk(filepath.Join(root, filepath.FromSlash(prefix)), func(p string, info os.FileInfo, err error) error {
			if err == nil && !info.IsDir() {
				r, _ := filepath.Rel(root, p)
				out = append(out, filepath.ToSlash(r))
			}
			return nil
		})
		return out
	}
	return collect(t, be, keys, s)
}

// TestCluster: three JetStream nodes, one API node and two workers as
// real processes. The worker holding the analysis is killed (SIGKILL) in
// the middle of it and replaced by a mottle worker, and one NATS node is
// stopped while frames are arriving; every job still completes exactly
// once and the results are identical to those of the embedded backend.
func TestCluster(t *testing.T) {
	frames := 40
	if testing.Short() {
		frames = 16
	}
	t0 := time.Now()
	sc := render(t, frames, 128)
	bin := mottleBinary(t)
	t.Logf("rendered and built at %v", time.Since(t0).Round(time.Millisecond))
	cl := startCluster(t)
	ctx := context.Background()

	// An observer connection, for checks: it creates the streams and
	// buckets with three replicas (a clustered server) before the
	// service processes start.
	obs := open(t, cl.url(""), func(o *Options) { o.Work = false; o.AckWait = 2 * time.Second })
	if info, err := obs.kvInfo(ctx); err != nil || info != 3 {
		t.Fatalf("key-value bucket replicas %d, %v; want 3", info, err)
	}
	backend := cl.url("ack_wait=2s")
	port := freePorts(t, 1)[0]
	api := startProc(t, "api", nil, bin, "serve", "--backend", backend, "--addr", fmt.Sprintf("127.0.0.1:%d", port),
		"--no-ui", "--data", t.TempDir())
	base := fmt.Sprintf("http://127.0.0.1:%d", port)
	waitFor(t, "API ready", func() bool {
		res, err := http.Get(base + "/readyz")
		if err == nil {
			res.Body.Close()
		}
		return err == nil && res.StatusCode == 200
	})
	worker := func(name string) *proc {
		return startProc(t, name, nil, bin, "worker", "--backend", backend, "--workers", "1")
	}
	holding := func(name string) *proc {
		return startProc(t, name, []string{workerEnv + "=" + backend}, os.Args[0], "-test.run=^$")
	}
	workers := []*proc{holding("worker-a"), holding("worker-b")}
	for _, w := range workers {
		waitFor(t, w.name+" ready", func() bool { return strings.Contains(w.out.String(), "computing up to") })
	}
	c := client{t, base}

	var s submission
	var killed *proc
	s.analysis = c.multipart("/v1/analyses", map[string][]byte{"reference": sc.slowRef, "deformed": sc.slowDef, "params": sc.slowPar}, http.StatusAccepted)
	// Kill the worker that holds the analysis running.
	waitFor(t, "the analysis to start", func() bool {
		for _, w := range workers {
			if started(w.out.String(), s.analysis) {
				killed = w
				return true
			}
		}
		return false
	})
	if j, err := obs.Store().Job(ctx, s.analysis); err != nil || j.State != jobs.Running {
		t.Fatalf("analysis not running when its worker is killed (%v, %v)", j.State, err)
	}
	killed.signal(syscall.SIGKILL)
	<-killed.done
	t.Logf("killed %s in the middle of the analysis at %v", killed.name, time.Since(t0).Round(time.Millisecond))
	workers = append(workers, worker("worker-c")) // back to two live workers

	s.series = c.multipart("/v1/series", map[string][]byte{"reference": sc.reference, "params": sc.params}, http.StatusCreated)
	for i, f := range sc.frames {
		if i == len(sc.frames)/2 {
			// Stop a NATS node while frames arrive and are computed.
			cl.nodes[1].signal(syscall.SIGTERM)
			<-cl.nodes[1].done
			t.Logf("stopped NATS node n2 after %d frames", i)
		}
		c.frame(s.series, f, i)
	}
	t.Logf("submitted at %v", time.Since(t0).Round(time.Millisecond))
	tctx := testCtx(t)
	for !done(ctx, obs.Store(), s, frames) {
		if tctx.Err() != nil {
			list, _ := obs.Store().Jobs(ctx, jobs.Filter{})
			for _, j := range list {
				if !j.State.Terminal() {
					t.Logf("unfinished: %s %s frame %d state %s attempts %d", j.ID, j.Kind, j.FrameIndex, j.State, j.Attempts)
				}
			}
			if ci, err := obs.queue.cons.Info(ctx); err == nil {
				t.Logf("consumer: pending %d, ack pending %d, redelivered %d, waiting pulls %d, leader %s",
					ci.NumPending, ci.NumAckPending, ci.NumRedelivered, ci.NumWaiting, ci.Cluster.Leader)
			} else {
				t.Logf("consumer info: %v", err)
			}
			n, err := obs.Pending(ctx)
			t.Fatalf("gave up waiting for every job to finish at the end of the test's time; %d messages in the job stream (%v)", n, err)
		}
		select {
		case <-tctx.Done():
		case <-time.After(20 * time.Millisecond):
		}
	}
	t.Logf("every job finished at %v", time.Since(t0).Round(time.Millisecond))

	// Nothing left in the queue, nothing dead-lettered.
	waitFor(t, "the job stream to empty", func() bool { n, err := obs.Pending(ctx); return err == nil && n == 0 })
	if dl, err := obs.DeadLetters(ctx); err != nil || len(dl) != 0 {
		t.Fatalf("dead letters %+v, %v; want none", dl, err)
	}
	a, _ := obs.Store().Job(ctx, s.analysis)
	if a.State != jobs.Succeeded || a.Attempts != 2 {
		t.Fatalf("killed analysis: state %s, attempts %d; want succeeded after 2 attempts (%+v)", a.State, a.Attempts, a.Error)
	}
	got := collect(t, obs.Jobs(), func(prefix string) []string {
		k, err := obs.Blobs().Keys(ctx, prefix)
		if err != nil {
			t.Fatal(err)
		}
		return k
	}, s)
	if len(got.jobs) != frames+1 {
		t.Fatalf("%d jobs, want %d", len(got.jobs), frames+1)
	}
	list, err := obs.Store().Jobs(ctx, jobs.Filter{Series: s.series})
	if err != nil || len(list) != frames {
		t.Fatalf("series has %d frame records (%v), want %d: a duplicate?", len(list), err, frames)
	}

	want := embeddedRun(t, sc)
	t.Logf("embedded run done at %v", time.Since(t0).Round(time.Millisecond))
	for pos, wj := range want.jobs {
		gj := got.jobs[pos]
		if gj.State != jobs.Succeeded || wj.State != jobs.Succeeded {
			t.Errorf("%s: state %s (nats) and %s (embedded), want both succeeded (%+v %+v)", pos, gj.State, wj.State, gj.Error, wj.Error)
			continue
		}
		if !reflect.DeepEqual(gj.Summary.Mean, wj.Summary.Mean) || gj.Summary.Valid != wj.Summary.Valid || gj.Summary.Points != wj.Summary.Points {
			t.Errorf("%s: summary %+v (nats) != %+v (embedded)", pos, gj.Summary, wj.Summary)
		}
		if !reflect.DeepEqual(gj.Results, wj.Results) {
			t.Errorf("%s: result files %v (nats) != %v (embedded)", pos, gj.Results, wj.Results)
		}
		for name := range want.files[pos] {
			if !bytes.Equal(got.files[pos][name], want.files[pos][name]) {
				t.Errorf("%s: %s differs from the embedded backend's:\n%s\n%s", pos, name, firstDiff(got.files[pos][name], want.files[pos][name]), firstDiff(want.files[pos][name], got.files[pos][name]))
			}
		}
		// Exactly the same objects: inputs and each result once.
		if !reflect.DeepEqual(got.blobs[pos], want.blobs[pos]) {
			t.Errorf("%s: blobs %v (nats) != %v (embedded)", pos, got.blobs[pos], want.blobs[pos])
		}
	}
	if m := want.jobs["frame-00"].Summary.Mean["E11"]; !(m > 0) {
		t.Errorf("frame 0 mean E11 = %g: the series did not stretch", m)
	}
	api.signal(syscall.SIGTERM)
	for _, w := range workers {
		w.signal(syscall.SIGTERM)
	}
}

// started reports whether a worker's JSON log says it started job id.
func started(log, id string) bool {
	sc := bufio.NewScanner(strings.NewReader(log))
	sc.Buffer(make([]byte, 1<<20), 1<<20)
	for sc.Scan() {
		line := sc.Text()
		if strings.Contains(line, `"job started"`) && strings.Contains(line, id) {
			return true
		}
	}
	return false
}

// kvInfo returns the replica count of the key-value bucket.
func (b *Backend) kvInfo(ctx context.Context) (int, error) {
	st, err := b.store.kv.Status(ctx)
	if err != nil {
		return 0, err
	}
	return st.(*jetstream.KeyValueBucketStatus).StreamInfo().Config.Replicas, nil
}

func discardLogger() *slog.Logger { return slog.New(slog.NewTextHandler(io.Discard, nil)) }

// firstDiff shows a's bytes around its first difference from b.
func firstDiff(a, b []byte) string {
	i := 0
	for i < len(a) && i < len(b) && a[i] == b[i] {
		i++
	}
	lo, hi := max(i-80, 0), min(i+80, len(a))
	return fmt.Sprintf("at byte %d: …%s…", i, a[lo:hi])
}

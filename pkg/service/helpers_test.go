package service_test

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"image"
	"image/color"
	"image/png"
	"io"
	"log/slog"
	"math"
	"math/rand/v2"
	"mime/multipart"
	"net/http"
	"net/http/httptest"
	"net/textproto"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/embedded"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// speckle renders a w×h 8-bit speckle pattern of Gaussian dots translated
// by (dx, dy): pixel (x, y) shows the pattern point (x − dx, y − dy), so
// the true displacement is u = dx, v = dy exactly (invented test data).
func speckle(w, h int, dx, dy float64, seed uint64) *image.Gray {
	r := rand.New(rand.NewPCG(seed, 7))
	type dot struct{ x, y, s float64 }
	dots := make([]dot, w*h/12)
	for i := range dots {
		dots[i] = dot{r.Float64()*float64(w+20) - 10, r.Float64()*float64(h+20) - 10, 1.2 + r.Float64()}
	}
	img := image.NewGray(image.Rect(0, 0, w, h))
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			X, Y := float64(x)-dx, float64(y)-dy
			v := 0.0
			for _, d := range dots {
				ddx, ddy := X-d.x, Y-d.y
				if ddx*ddx+ddy*ddy < 25 {
					v += math.Exp(-(ddx*ddx + ddy*ddy) / (2 * d.s * d.s))
				}
			}
			img.SetGray(x, y, color.Gray{uint8(math.Min(255, 30+180*v))})
		}
	}
	return img
}

func encodePNG(t testing.TB, img image.Image) []byte {
	var b bytes.Buffer
	if err := png.Encode(&b, img); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// pair returns PNG bytes of a reference and a deformed image shifted by (dx, dy).
func pair(t testing.TB, w, h, dx, dy int, seed uint64) (ref, def []byte) {
	return encodePNG(t, speckle(w, h, 0, 0, seed)), encodePNG(t, speckle(w, h, float64(dx), float64(dy), seed))
}

// fakeAnalyzer measures the integer translation between the images by an
// exhaustive search of the sum of squared differences over ±4 px in the
// central region: a real, checkable computation, cheap enough for many jobs.
type fakeAnalyzer struct {
	// midway, if not nil, is called once a job has reported progress 1 of
	// 10; the job goes on when it returns (TestEvents holds a job there
	// until its event stream has shown that progress).
	midway func(ctx context.Context)
	runs   atomic.Int64
}

func (f *fakeAnalyzer) Run(ctx context.Context, in service.Input, progress func(done, total int)) (*service.Result, error) {
	f.runs.Add(1)
	const R = 4
	const steps = 10
	progress(1, steps)
	if f.midway != nil {
		f.midway(ctx)
	}
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	best, bu, bv := math.Inf(1), 0, 0
	for v := -R; v <= R; v++ {
		for u := -R; u <= R; u++ {
			ssd := 0.0
			for y := R; y < in.Ref.H-R; y++ {
				for x := R; x < in.Ref.W-R; x++ {
					d := float64(in.Def.At(x+u, y+v) - in.Ref.At(x, y))
					ssd += d * d
				}
			}
			if ssd < best {
				best, bu, bv = ssd, u, v
			}
		}
	}
	progress(steps, steps)
	field, _ := json.Marshal(map[string]any{"u": bu, "v": bv, "subset": in.Params.Subset})
	return &service.Result{
		Files: map[string][]byte{
			"field.json":     field,
			"field.csv":      []byte(fmt.Sprintf("x,y,u,v\n0,0,%d,%d\n", bu, bv)),
			"field.vts":      []byte("<VTKFile/>"),
			"field.npz":      []byte("PK"),
			"arrays/u.npy":   []byte("\x93NUMPY"),
			"arrays/E11.npy": []byte("\x93NUMPY"),
		},
		Summary: jobs.Summary{Points: 1, Valid: 1, ValidFraction: 1, Mean: map[string]float64{"u": float64(bu), "v": float64(bv)}},
	}, nil
}

func (f *fakeAnalyzer) Map(ctx context.Context, open func(string) (io.ReadCloser, error), req service.MapRequest, bg *imageio.Gray) ([]byte, error) {
	if req.Quantity != "u" && req.Quantity != "E11" {
		return nil, &service.FieldError{Field: "quantity", Detail: "unknown quantity " + req.Quantity, Status: http.StatusBadRequest}
	}
	rc, err := open("field.json")
	if err != nil {
		return nil, err
	}
	rc.Close()
	img := image.NewGray(image.Rect(0, 0, bg.W, bg.H))
	for i := range img.Pix {
		img.Pix[i] = uint8(bg.Pix[i])
	}
	var b bytes.Buffer
	png.Encode(&b, img)
	return b.Bytes(), nil
}

type testServer struct {
	*httptest.Server
	srv   *service.Server
	fake  *fakeAnalyzer
	token string
	stop  func()
}

// newServer starts a service on the embedded backend in a temporary
// directory, on 127.0.0.1, with the options changed by mod.
func newServer(t testing.TB, mod func(*service.Config)) *testServer {
	t.Helper()
	return newServerWith(t, false, mod)
}

// newServerWith is newServer; noSync turns off fsync (for fuzzing only).
func newServerWith(t testing.TB, noSync bool, mod func(*service.Config)) *testServer {
	t.Helper()
	be, err := embedded.OpenWith(t.TempDir(), embedded.Options{QueueCap: 64, NoSync: noSync})
	if err != nil {
		t.Fatal(err)
	}
	fake := &fakeAnalyzer{}
	cfg := service.Config{Backend: be, Analyzer: fake, Workers: 2,
		Logger: slog.New(slog.NewJSONHandler(io.Discard, nil)), ShutdownGrace: 5 * time.Second}
	if mod != nil {
		mod(&cfg)
	}
	s, err := service.New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	stop, err := s.Start(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	ts := httptest.NewServer(s.Handler())
	t.Cleanup(func() {
		ts.Close()
		stop()
		be.Close()
	})
	tok := ""
	if len(cfg.Tokens) > 0 {
		tok = cfg.Tokens[0]
	}
	return &testServer{Server: ts, srv: s, fake: fake, token: tok, stop: stop}
}

// part is one multipart part.
type part struct {
	name, filename, ctype string
	data                  []byte
}

func multipartBody(t testing.TB, parts ...part) (string, []byte) {
	var b bytes.Buffer
	mw := multipart.NewWriter(&b)
	for _, p := range parts {
		h := textproto.MIMEHeader{}
		cd := fmt.Sprintf(`form-data; name=%q`, p.name)
		if p.filename != "" {
			cd += fmt.Sprintf(`; filename=%q`, p.filename)
		}
		h.Set("Content-Disposition", cd)
		if p.ctype != "" {
			h.Set("Content-Type", p.ctype)
		}
		w, err := mw.CreatePart(h)
		if err != nil {
			t.Fatal(err)
		}
		w.Write(p.data)
	}
	mw.Close()
	return mw.FormDataContentType(), b.Bytes()
}

func analysisParts(ref, def []byte, params string) []part {
	ps := []part{{"reference", "ref.png", "image/png", ref}, {"deformed", "def.png", "image/png", def}}
	if params != "" {
		ps = append(ps, part{"params", "", "application/json", []byte(params)})
	}
	return ps
}

// do sends a request and returns the response with its body read.
func (ts *testServer) do(t testing.TB, method, path, ctype string, body []byte) (*http.Response, []byte) {
	t.Helper()
	req, err := http.NewRequest(method, ts.URL+path, bytes.NewReader(body))
	if err != nil {
		t.Fatal(err)
	}
	if ctype != "" {
		req.Header.Set("Content-Type", ctype)
	}
	if ts.token != "" {
		req.Header.Set("Authorization", "Bearer "+ts.token)
	}
	resp, err := ts.client().Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		t.Fatal(err)
	}
	return resp, b
}

type jobDoc struct {
	ID       string            `json:"id"`
	State    string            `json:"state"`
	Frame    int               `json:"frame"`
	Summary  *jobs.Summary     `json:"summary"`
	Error    *jobs.Failure     `json:"error"`
	Links    map[string]string `json:"links"`
	Field    json.RawMessage   `json:"field"`
	Progress jobs.Progress     `json:"progress"`
}

func decodeJSON[T any](t testing.TB, b []byte) T {
	t.Helper()
	var v T
	if err := json.Unmarshal(b, &v); err != nil {
		t.Fatalf("decode %s: %v", b, err)
	}
	return v
}

// waitDone polls a job until it is finished.
func (ts *testServer) waitDone(t testing.TB, path string) jobDoc {
	t.Helper()
	var j jobDoc
	poll(t, path+" to finish", func() bool {
		resp, b := ts.do(t, "GET", path, "", nil)
		if resp.StatusCode != 200 {
			t.Fatalf("GET %s: %d %s", path, resp.StatusCode, b)
		}
		j = decodeJSON[jobDoc](t, b)
		return j.State == "succeeded" || j.State == "failed" || j.State == "canceled"
	})
	return j
}

// waitBound bounds each wait of a test (testCtx). Tests wait for events,
// never for a time: the slowest wait here (a stereo series or 64 analyses
// of TestConcurrentClients with the rest of the suite loading both cores)
// takes well under a minute, and the bound only turns a hang into a
// failure with a message long before the package's time limit, which
// would otherwise take most of CI's time.
const waitBound = 3 * time.Minute

// testCtx returns a context for one wait (or one request) that ends after
// waitBound, or a little before the test binary's -timeout would stop the
// test if that is sooner.
func testCtx(t testing.TB) context.Context {
	end := time.Now().Add(waitBound)
	if dt, ok := t.(interface{ Deadline() (time.Time, bool) }); ok {
		if d, ok := dt.Deadline(); ok {
			if e := d.Add(-time.Until(d) / 20); e.Before(end) { // leave time to report
				end = e
			}
		}
	}
	ctx, cancel := context.WithDeadline(context.Background(), end)
	t.Cleanup(cancel)
	return ctx
}

// poll checks cond every 20 ms until it holds; it fails the test when
// testCtx ends (waitBound).
func poll(t testing.TB, what string, cond func() bool) {
	t.Helper()
	ctx, t0 := testCtx(t), time.Now()
	for !cond() {
		select {
		case <-ctx.Done():
			t.Fatalf("gave up waiting for %s after %v", what, time.Since(t0).Round(time.Second))
		case <-time.After(20 * time.Millisecond):
		}
	}
}

// holder holds jobs as Config.BeforeCompute: each job it is given stays
// running (reported on started) until release is called or the job's
// context ends. Tests use it to act on a running job without depending
// on how long the job would take.
type holder struct {
	started chan string  // IDs of the jobs given to the hook, in order
	free    atomic.Int64 // how many jobs, from now, to let through without holding
	open    chan struct{}
	once    sync.Once
}

func newHolder() *holder {
	return &holder{started: make(chan string, 256), open: make(chan struct{})}
}

// hook is the Config.BeforeCompute function.
func (h *holder) hook(ctx context.Context, j jobs.Job) {
	h.started <- j.ID
	if h.free.Add(-1) >= 0 {
		return
	}
	select {
	case <-h.open:
	case <-ctx.Done():
	}
}

// release lets every held job, and every later one, go on.
func (h *holder) release() { h.once.Do(func() { close(h.open) }) }

// next returns the ID of the next job that the holder holds.
func (h *holder) next(t testing.TB) string {
	t.Helper()
	select {
	case id := <-h.started:
		return id
	case <-testCtx(t).Done():
		t.Fatal("no job started")
		return ""
	}
}

type problemDoc struct {
	Type   string                 `json:"type"`
	Title  string                 `json:"title"`
	Status int                    `json:"status"`
	Detail string                 `json:"detail"`
	Errors []service.FieldProblem `json:"errors"`
}

func embeddedQueue(n int) jobs.Queue { return embedded.NewQueue(n) }

func (ts *testServer) srv2Backend(t testing.TB) *jobs.Backend {
	be, err := embedded.Open(t.TempDir(), 4)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { be.Close() })
	return be
}

// newClientOnly wraps a base URL of a server in another process.
func newClientOnly(url string) *httptest.Server {
	return &httptest.Server{URL: url, Config: &http.Server{}}
}

// waitState polls a job until it reaches state.
func (ts *testServer) waitState(t testing.TB, path, state string) {
	t.Helper()
	poll(t, path+" to be "+state, func() bool {
		_, b := ts.do(t, "GET", path, "", nil)
		return decodeJSON[jobDoc](t, b).State == state
	})
}

func (ts *testServer) client() *http.Client {
	if c := ts.Server.Client(); c != nil {
		return c
	}
	return http.DefaultClient
}

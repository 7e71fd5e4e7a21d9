package natsjs

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"net/http"
	"os"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// TestClusterFramesInFlight is TestCluster's failures with the frames of
// one series solved ahead (issue 21): three JetStream nodes, an API node
// with --frames-in-flight 3 and two workers as real processes. One worker
// holds the first attempt of the frame it gets in its turn; the other
// solves the next frames ahead meanwhile; then the holding worker is
// killed (SIGKILL) with its frame certainly in the middle, a mottle
// worker takes its place, and a NATS node is stopped while the second
// half of the frames arrives. The series completes; its record and the
// API's /metrics show the bound; the tracker state after the last frame
// holds every frame once and in order (no frame computed twice into it);
// and its curve is the undisturbed sequential run's within the bound
// package series guarantees for frames solved ahead (2e-3 px, 2e-5
// strain: IC-GN's stopping rule at 1e-4 px, series.TestSolveAhead).
// Every wait is bounded by two minutes.
func TestClusterFramesInFlight(t *testing.T) {
	const frames, bound = 12, 3
	sc := render(t, frames, 128)
	bin := mottleBinary(t)
	cl := startCluster(t)
	ctx := context.Background()
	obs := open(t, cl.url(""), func(o *Options) { o.Work = false; o.AckWait = 2 * time.Second })
	backend := cl.url("ack_wait=2s")
	port := freePorts(t, 1)[0]
	startProc(t, "api", nil, bin, "serve", "--backend", backend, "--addr", fmt.Sprintf("127.0.0.1:%d", port),
		"--no-ui", "--data", t.TempDir(), "--frames-in-flight", fmt.Sprint(bound))
	base := fmt.Sprintf("http://127.0.0.1:%d", port)
	wait := func(what string, cond func() bool) {
		t.Helper()
		for end := time.Now().Add(2 * time.Minute); !cond(); time.Sleep(20 * time.Millisecond) {
			if time.Now().After(end) {
				t.Fatalf("gave up waiting for %s after 2 minutes", what)
			}
		}
	}
	wait("API ready", func() bool {
		res, err := http.Get(base + "/readyz")
		if err == nil {
			res.Body.Close()
		}
		return err == nil && res.StatusCode == 200
	})
	ready := func(w *proc) *proc {
		wait(w.name+" ready", func() bool { return strings.Contains(w.out.String(), "computing up to") })
		return w
	}
	holder := ready(startProc(t, "worker-a", []string{workerEnv + "=" + backend, holdFramesEnv + "=1"}, os.Args[0], "-test.run=^$"))
	ws := []*proc{ready(startProc(t, "worker-b", nil, bin, "worker", "--backend", backend, "--workers", "1", "--threads", "1"))}
	c := client{t, base}
	id := c.multipart("/v1/series", map[string][]byte{"reference": sc.reference, "params": sc.params}, http.StatusCreated)
	var rec struct {
		MaxInFlight int `json:"max_frames_in_flight"`
	}
	req, _ := http.NewRequest("GET", base+"/v1/series/"+id, nil)
	if err := json.Unmarshal(c.do(req, http.StatusOK), &rec); err != nil || rec.MaxInFlight != bound {
		t.Errorf("series record: max_frames_in_flight %d (%v), want %d", rec.MaxInFlight, err, bound)
	}
	req, _ = http.NewRequest("GET", base+"/metrics", nil)
	if m := string(c.do(req, http.StatusOK)); !strings.Contains(m, fmt.Sprintf("\nmottle_series_max_frames_in_flight %d\n", bound)) {
		t.Errorf("/metrics does not give the bound %d:\n%s", bound, m)
	}

	for i, f := range sc.frames {
		if i == frames/2 {
			wait("a frame held by worker-a and a frame solved ahead by worker-b", func() bool {
				return strings.Contains(holder.out.String(), `"job started"`) && strings.Contains(ws[0].out.String(), `"frame solved ahead"`)
			})
			holder.signal(syscall.SIGKILL)
			<-holder.done
			ws = append(ws, startProc(t, "worker-c", nil, bin, "worker", "--backend", backend, "--workers", "1", "--threads", "1"))
			cl.nodes[1].signal(syscall.SIGTERM)
			<-cl.nodes[1].done
		}
		c.frame(id, f, i)
	}
	var sr *jobs.Series
	wait("the series", func() bool {
		var err error
		if sr, err = obs.Store().Series(ctx, id); err != nil || len(sr.Frames) != frames {
			return false
		}
		for _, fid := range sr.Frames {
			if j, err := obs.Store().Job(ctx, fid); err != nil || !j.State.Terminal() {
				return false
			}
		}
		return true
	})
	retried := 0
	for k, fid := range sr.Frames {
		j, _ := obs.Store().Job(ctx, fid)
		if j.State != jobs.Succeeded {
			t.Fatalf("frame %d: %s %+v", k, j.State, j.Error)
		}
		if j.Attempts > 1 {
			retried++
		}
	}
	if retried < 1 {
		t.Errorf("no frame took a second attempt, want at least the one worker-a held when it was killed")
	}
	rc, err := obs.Blobs().Get(ctx, jobs.SeriesKey(id, fmt.Sprintf("state/%06d.bin", frames-1)))
	if err != nil {
		t.Fatalf("state after the last frame: %v", err)
	}
	b, err := io.ReadAll(rc)
	rc.Close()
	var st series.State
	if err == nil {
		// The last frame was added from its solution: its state names it.
		st, err = series.DecodeStateWith(b, func() ([]byte, error) {
			rc, err := obs.Blobs().Get(ctx, jobs.SeriesKey(id, fmt.Sprintf("solved/%06d.bin", frames-1)))
			if err != nil {
				return nil, err
			}
			defer rc.Close()
			return io.ReadAll(rc)
		})
	}
	if err != nil {
		t.Fatal(err)
	}
	if len(st.Curve) != frames+1 {
		t.Fatalf("the state has %d curve rows, want %d (each frame once)", len(st.Curve), frames+1)
	}
	for i, r := range st.Curve {
		if r.Index != i {
			t.Errorf("curve row %d has index %d: frames out of order or added twice", i, r.Index)
		}
	}
	seq := sequentialCurve(t, sc, st.Params)
	for i, want := range seq.Rows {
		for _, q := range series.MeanNames {
			bnd := 2e-5
			if q == "u" || q == "v" {
				bnd = 2e-3
			}
			if d := math.Abs(st.Curve[i].Mean[q] - want.Mean[q]); !(d <= bnd) {
				t.Errorf("frame %d %s: %g, undisturbed sequential run %g (bound %g)", i, q, st.Curve[i].Mean[q], want.Mean[q], bnd)
			}
		}
	}
	for _, w := range ws {
		w.signal(syscall.SIGTERM)
	}
}

// sequentialCurve adds the frames of sc one after the other to a tracker
// with parameters p, with the time stamps and loads the client sends.
func sequentialCurve(t *testing.T, sc *scenario, p series.Params) series.Curve {
	t.Helper()
	dec := func(b []byte) *imageio.Gray {
		g, err := imageio.Decode(bytes.NewReader(b), imageio.Limits{})
		if err != nil {
			t.Fatal(err)
		}
		return g
	}
	tr, err := series.New(dec(sc.reference), series.FrameMeta{Name: "reference"}, p)
	if err != nil {
		t.Fatal(err)
	}
	for n, f := range sc.frames {
		tm, ld := 0.5*float64(n+1), 25*float64(n+1)
		if _, err := tr.Add(context.Background(), dec(f), series.FrameMeta{Time: &tm, Load: &ld}); err != nil {
			t.Fatal(err)
		}
	}
	return tr.Curve()
}

package natsjs

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"net/http"
	"os"
	"os/signal"
	"path/filepath"
	"runtime"
	"runtime/pprof"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// BenchmarkClusterFrames measures series frames per second through a
// three-node JetStream cluster, one API node and one or two workers
// (real processes, one job at a time each, one thread per job), all on
// this machine, for one series and for two series sent side by side. The
// frames of one series run in order (each starts from the previous one's
// tracker state), so a second worker helps only with a second series. Frames are 256×256 px with subset 21 and step 4 (3 364
// points), so compute, not messaging, dominates. Run with
//
//	go test -run '^$' -bench ClusterFrames -benchtime 2x ./pkg/service/natsjs
func BenchmarkClusterFrames(b *testing.B) {
	const frames = 24
	sc := render(b, frames, 256)
	sc.params = []byte(`{"subset":21,"step":4}`)
	bin := mottleBinary(b)
	for _, c := range []struct{ workers, series int }{{1, 1}, {2, 1}, {2, 2}} {
		nw := c.workers
		b.Run(fmt.Sprintf("workers=%d/series=%d", c.workers, c.series), func(b *testing.B) {
			cl := startCluster(b)
			obs := open(b, cl.url(""), func(o *Options) { o.Work = false })
			backend := cl.url("")
			port := freePorts(b, 1)[0]
			api := startProc(b, "api", nil, bin, "serve", "--backend", backend, "--addr", fmt.Sprintf("127.0.0.1:%d", port),
				"--no-ui", "--data", b.TempDir(), "--queue", "256")
			base := fmt.Sprintf("http://127.0.0.1:%d", port)
			waitFor(b, "API ready", func() bool {
				res, err := http.Get(base + "/readyz")
				if err == nil {
					res.Body.Close()
				}
				return err == nil && res.StatusCode == 200
			})
			var ws []*proc
			for i := 0; i < nw; i++ {
				w := startProc(b, fmt.Sprintf("worker-%d", i), nil, bin, "worker", "--backend", backend, "--workers", "1", "--threads", "1")
				waitFor(b, "worker ready", func() bool { return strings.Contains(w.out.String(), "computing up to") })
				ws = append(ws, w)
			}
			hc := client{b, base}
			ctx := context.Background()
			b.ResetTimer()
			start := time.Now()
			var compute float64
			for i := 0; i < b.N; i++ {
				var ids []string
				for k := 0; k < c.series; k++ {
					ids = append(ids, hc.multipart("/v1/series", map[string][]byte{"reference": sc.reference, "params": sc.params}, http.StatusCreated))
				}
				for k, f := range sc.frames {
					for _, id := range ids {
						hc.frame(id, f, k)
					}
				}
				for _, id := range ids {
					waitFor(b, "the series", func() bool {
						sr, err := obs.Store().Series(ctx, id)
						if err != nil || len(sr.Frames) != frames {
							return false
						}
						for _, fid := range sr.Frames {
							if j, err := obs.Store().Job(ctx, fid); err != nil || !j.State.Terminal() {
								return false
							}
						}
						return true
					})
					sr, _ := obs.Store().Series(ctx, id)
					for _, fid := range sr.Frames {
						if j, err := obs.Store().Job(ctx, fid); err == nil && j.Summary != nil {
							compute += j.Summary.Seconds
						}
					}
				}
			}
			el := time.Since(start)
			b.StopTimer()
			b.ReportMetric(float64(b.N*frames*c.series)/el.Seconds(), "frames/s")
			// The compute time of one frame as its worker measured it: the
			// rest of 1/(frames/s)·workers is messaging, storage and waiting.
			b.ReportMetric(compute/float64(b.N*frames*c.series), "compute-s/frame")
			api.signal(syscall.SIGTERM)
			for _, w := range ws {
				w.signal(syscall.SIGTERM)
			}
		})
	}
}

// BenchmarkClusterSeries measures one 60-frame series of 512×512 frames
// (subset 21, step 8, direct mode: 3 600 points a frame) through a
// three-node JetStream cluster with three replicas of every stream
// (nats=r3), one API node and 1, 2 or 4 workers (real processes, one job
// at a time each, one compute thread per job, so that this 2-core machine
// can show the gain), with the frames of the series solved ahead
// (--frames-in-flight equal to the workers). As a second configuration,
// nats=r1 runs the same on a single NATS server with one replica: the
// hand-over cost without replication, not a faster cluster. In a real
// cluster the NATS nodes run on machines of their own; here they share
// the cores with the workers, so it reports their CPU per frame
// (nats+api-cpu-s/frame, the three nodes and the API; api-cpu-s/frame, the
// API alone) and the bound it
// sets: bound-frames/s = cores / (worker + NATS + API CPU seconds per
// frame), which no number of workers on this machine can pass.
// Other processes on the machine lengthen the wall time, so it also
// reports figures of the structure: the workers' CPU seconds per frame
// (user+sys, /proc), and the seconds per frame they spent computing as
// their logs give them (jobs, and frames solved ahead) and idle (the rest
// of wall time × workers). With MOTTLE_BENCH_BASE set to the path of
// another mottle binary (an earlier commit's), every case runs with it
// too, interleaved in the same run (bin=base); MOTTLE_BENCH_NEW, when set,
// names the binary of bin=new instead of one built from this tree, and
// MOTTLE_BENCH_COMPRESS set adds bin=new-compress, the new binary with
// blobs deflated (the backend URL's compress=true). Run with
//
//	go test -run '^$' -bench ClusterSeries -benchtime 1x ./pkg/service/natsjs
func BenchmarkClusterSeries(b *testing.B) {
	const frames = 60
	sc := render(b, frames, 512)
	sc.params = []byte(`{"subset":21,"step":8,"incremental":"never"}`)
	newBin := os.Getenv("MOTTLE_BENCH_NEW")
	if newBin == "" {
		newBin = mottleBinary(b)
	}
	type binary struct{ name, path, query string }
	bins := []binary{{"new", newBin, ""}}
	if p := os.Getenv("MOTTLE_BENCH_BASE"); p != "" {
		bins = append([]binary{{"base", p, ""}}, bins...)
	}
	if os.Getenv("MOTTLE_BENCH_COMPRESS") != "" {
		bins = append(bins, binary{"new-compress", newBin, "compress=true"})
	}
	profile := os.Getenv(profileEnv)
	for _, nodes := range []int{3, 1} {
		for _, c := range []struct{ workers, inFlight int }{{1, 1}, {2, 2}, {4, 4}} {
			for _, bn := range bins {
				bin := bn.path
				name := fmt.Sprintf("nats=r%d/bin=%s/workers=%d/in-flight=%d", nodes, bn.name, c.workers, c.inFlight)
				b.Run(name, func(b *testing.B) {
					prof := ""
					if profile != "" {
						prof = filepath.Join(profile, strings.NewReplacer("/", "_", "=", "").Replace(name))
					}
					cl := startNodes(b, nodes, prof)
					obs := open(b, cl.url(""), func(o *Options) { o.Work = false })
					backend := cl.url(bn.query)
					port := freePorts(b, 1)[0]
					var apiEnv []string
					if prof != "" {
						apiEnv = []string{fmt.Sprintf("MOTTLE_CPUPROFILE=%s-api.pprof", prof)}
					}
					api := startProc(b, "api", apiEnv, bin, "serve", "--backend", backend, "--addr", fmt.Sprintf("127.0.0.1:%d", port),
						"--no-ui", "--data", b.TempDir(), "--queue", "256", "--frames-in-flight", fmt.Sprint(c.inFlight))
					base := fmt.Sprintf("http://127.0.0.1:%d", port)
					waitFor(b, "API ready", func() bool {
						res, err := http.Get(base + "/readyz")
						if err == nil {
							res.Body.Close()
						}
						return err == nil && res.StatusCode == 200
					})
					var ws []*proc
					for i := 0; i < c.workers; i++ {
						var env []string
						if prof != "" {
							env = []string{fmt.Sprintf("MOTTLE_CPUPROFILE=%s-worker-%d.pprof", prof, i)}
						}
						w := startProc(b, fmt.Sprintf("worker-%d", i), env, bin, "worker", "--backend", backend, "--workers", "1", "--threads", "1")
						waitFor(b, "worker ready", func() bool { return strings.Contains(w.out.String(), "computing up to") })
						ws = append(ws, w)
					}
					hc := client{b, base}
					ctx := context.Background()
					b.ResetTimer()
					var el time.Duration
					var compute float64
					cpu0 := 0.0
					for _, w := range ws {
						cpu0 += procCPU(w)
					}
					// The NATS nodes and the API share the cores with the
					// workers: their CPU time bounds the gain as well.
					others := append([]*proc{api}, cl.nodes...)
					other0 := make([]float64, len(others))
					for k, p := range others {
						other0[k] = procCPU(p)
					}
					var tp *tap
					if os.Getenv(tapEnv) != "" {
						tp = startTap(b, obs.nc, obs.n.objects)
					}
					for i := 0; i < b.N; i++ {
						id := hc.multipart("/v1/series", map[string][]byte{"reference": sc.reference, "params": sc.params}, http.StatusCreated)
						wctx, stopWatch := context.WithCancel(ctx)
						w, err := obs.Store().Watch(wctx, id)
						if err != nil {
							b.Fatal(err)
						}
						start := time.Now()
						for k, f := range sc.frames {
							hc.frame(id, f, k)
						}
						waitSeries(b, obs, w, id, frames)
						el += time.Since(start)
						stopWatch()
						sr, _ := obs.Store().Series(ctx, id)
						for k, fid := range sr.Frames {
							j, err := obs.Store().Job(ctx, fid)
							if err != nil || j.State != jobs.Succeeded {
								b.Fatalf("frame %d: %v %+v", k, err, j)
							}
							compute += j.Summary.Seconds
						}
					}
					b.StopTimer()
					if tp != nil {
						fmt.Printf("%s, per frame, by kind:\n%s", name, tp.table(b.N*frames))
					}
					if prof != "" {
						stopProfiles(b, append(append([]*proc{api}, cl.nodes...), ws...))
					}
					cpu, solve := -cpu0, 0.0
					for _, w := range ws {
						cpu += procCPU(w)
						solve += logSeconds(w.out.String(), "frame solved ahead")
					}
					nats, apiCPU := 0.0, 0.0
					for k, p := range others {
						c := procCPU(p) - other0[k]
						nats += c
						if p == api {
							apiCPU = c
						}
					}
					n := float64(b.N * frames)
					b.ReportMetric(n/el.Seconds(), "frames/s")
					b.ReportMetric(cpu/n, "cpu-s/frame")
					b.ReportMetric(nats/n, "nats+api-cpu-s/frame")
					b.ReportMetric(apiCPU/n, "api-cpu-s/frame")
					b.ReportMetric(float64(runtime.NumCPU())*n/(cpu+nats), "bound-frames/s")
					b.ReportMetric(compute/n, "add-s/frame")
					b.ReportMetric(solve/n, "solve-s/frame")
					b.ReportMetric(max(0, el.Seconds()*float64(c.workers)-compute-solve)/n, "idle-s/frame")
					api.signal(syscall.SIGTERM)
					for _, w := range ws {
						w.signal(syscall.SIGTERM)
					}
				})
			}
		}
	}
}

// waitSeries waits until the last of the frames of series id has
// finished, as the updates of its records arrive on w (a watch of the
// series, from obs's mirror of the records), and looks at the records
// themselves once a second besides. Before, the benchmark read the
// series' record and its last frame's from the bucket every 20 ms, 50 to
// 100 reads a second that the NATS nodes answered on the cores the
// workers share, a load a real client does not add.
func waitSeries(b *testing.B, obs *Backend, w <-chan *jobs.Job, id string, frames int) {
	b.Helper()
	ctx := testCtx(b)
	done := func() bool {
		sr, err := obs.Store().Series(ctx, id)
		if err != nil || len(sr.Frames) != frames {
			return false
		}
		j, err := obs.Store().Job(ctx, sr.Frames[frames-1])
		return err == nil && j.State.Terminal()
	}
	tick := time.NewTicker(time.Second)
	defer tick.Stop()
	for {
		select {
		case j, ok := <-w:
			if !ok {
				w = nil // the watch ended: the ticker goes on
				continue
			}
			if j.Kind == jobs.Frame && j.FrameIndex == frames-1 && j.State.Terminal() {
				return
			}
		case <-tick.C:
			if done() {
				return
			}
		case <-ctx.Done():
			b.Fatalf("gave up waiting for series %s at the end of the test's time", id)
		}
	}
}

// procCPU returns the user+system CPU seconds of a running process so far
// (proc(5): fields 14 and 15 of /proc/<pid>/stat, in clock ticks of
// 1/100 s, Linux's USER_HZ), or 0 when they cannot be read.
func procCPU(p *proc) float64 {
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/stat", p.cmd.Process.Pid))
	if err != nil {
		return 0
	}
	s := string(b)
	if i := strings.LastIndexByte(s, ')'); i >= 0 {
		s = s[i+1:] // the command name may hold spaces
	}
	f := strings.Fields(s) // f[0] is field 3 (state)
	if len(f) < 13 {
		return 0
	}
	u, _ := strconv.ParseFloat(f[11], 64)
	st, _ := strconv.ParseFloat(f[12], 64)
	return (u + st) / 100
}

// logSeconds adds up the "seconds" of a worker's JSON log lines whose
// message is msg.
func logSeconds(log, msg string) float64 {
	sum := 0.0
	for _, line := range strings.Split(log, "\n") {
		if !strings.Contains(line, `"msg":"`+msg+`"`) {
			continue
		}
		var v struct {
			Seconds float64 `json:"seconds"`
		}
		if json.Unmarshal([]byte(line), &v) == nil {
			sum += v.Seconds
		}
	}
	return sum
}

// BenchmarkDeleteState removes one series state (one object, as the
// runner does after every frame) from an object store that holds others
// objects besides, by Delete of its key as a prefix (which lists the
// store) and by DeleteKey, on a single JetStream server. Each op puts
// the object and removes it; "put" is the Put alone, the baseline of the
// same run. Run with
//
//	go test -run '^$' -bench DeleteState ./pkg/service/natsjs
func BenchmarkDeleteState(b *testing.B) {
	for _, others := range []int{100, 1000} {
		be := open(b, runServer(b), func(o *Options) { o.Work = false })
		bl := be.Blobs()
		ctx := context.Background()
		for k := range others {
			if err := bl.Put(ctx, jobs.ResultKey(jobs.NewID(), "field.json"), strings.NewReader(fmt.Sprint(k))); err != nil {
				b.Fatal(err)
			}
		}
		key := jobs.SeriesKey(jobs.NewID(), "state/000001.json")
		for _, c := range []struct {
			name string
			del  func() error
		}{
			{"put", func() error { return nil }},
			{"Delete", func() error { return bl.Delete(ctx, key) }},
			{"DeleteKey", func() error { return bl.DeleteKey(ctx, key) }},
		} {
			b.Run(fmt.Sprintf("others=%d/%s", others, c.name), func(b *testing.B) {
				for i := range b.N {
					if err := bl.Put(ctx, key, strings.NewReader(fmt.Sprint(i))); err != nil {
						b.Fatal(err)
					}
					if err := c.del(); err != nil {
						b.Fatal(err)
					}
				}
			})
		}
	}
}

// profileEnv names a directory: with it set, BenchmarkClusterSeries has
// every NATS node write a CPU profile, from its start to the end of the
// measured part, to it
// (<case>-n<i>.pprof), and passes MOTTLE_CPUPROFILE=<case>-worker-<i>.pprof
// to the workers and <case>-api.pprof to the API node, for a mottle binary
// built to honour it (the released
// one does not: leave the variable unset with it). Read them with
// go tool pprof.
const profileEnv = "MOTTLE_BENCH_PROFILE"

// profileUntilUSR1 writes this process's CPU profile to path from now
// until SIGUSR1 (or the returned stop), then prints "profile written".
func profileUntilUSR1(path string) (stop func(), err error) {
	f, err := os.Create(path)
	if err != nil {
		return nil, fmt.Errorf("cpu profile: %w", err)
	}
	if err := pprof.StartCPUProfile(f); err != nil {
		f.Close()
		return nil, fmt.Errorf("cpu profile %s: %w", path, err)
	}
	var once sync.Once
	stop = func() {
		once.Do(func() {
			pprof.StopCPUProfile()
			f.Close()
			fmt.Println("profile written")
		})
	}
	usr1 := make(chan os.Signal, 1)
	signal.Notify(usr1, syscall.SIGUSR1)
	go func() { <-usr1; stop() }()
	return stop, nil
}

// stopProfiles sends SIGUSR1 to ps and waits until each has written its
// profile, for at most profileWait: a mottle binary that does not honour
// MOTTLE_CPUPROFILE (the one the benchmark builds does not) never says so,
// and the benchmark then fails at once rather than at the end of its time.
func stopProfiles(b *testing.B, ps []*proc) {
	for _, p := range ps {
		p.signal(syscall.SIGUSR1)
	}
	end := time.Now().Add(profileWait)
	for _, p := range ps {
		for !strings.Contains(p.out.String(), "profile written") {
			if time.Now().After(end) {
				b.Fatalf("%s wrote no profile within %v: %s needs a mottle binary built to honour MOTTLE_CPUPROFILE (MOTTLE_BENCH_NEW, MOTTLE_BENCH_BASE)", p.name, profileWait, profileEnv)
			}
			time.Sleep(20 * time.Millisecond)
		}
	}
}

// profileWait bounds the wait for a process's profile (stopProfiles).
const profileWait = 30 * time.Second

// BenchmarkBlobGet reads an object of 1.1 MB (a frame's series state as
// JSON) from a single JetStream server in this process, so that ns/op
// holds the server's side too: Get as it reads now (chunks of up to
// maxChunk, answers decoded by nextChunk), and as the baseline of the
// same run, the object written in the object store's default 128 KiB
// chunks and read with jetstream.Stream.GetMsg per chunk (the read of
// earlier versions). Run with
//
//	go test -run '^$' -bench BlobGet -benchmem ./pkg/service/natsjs
func BenchmarkBlobGet(b *testing.B) {
	be := open(b, runServer(b), func(o *Options) { o.Work = false })
	bl := be.Blobs()
	ctx := context.Background()
	data := []byte(strings.Repeat(`{"u":[0.123456789012,-1.5e-3],"ok":true},`, 1_100_000/42))
	key := jobs.InputKey(jobs.NewID(), "state")
	if err := bl.Put(ctx, key, bytes.NewReader(data)); err != nil {
		b.Fatal(err)
	}
	old := jobs.InputKey(jobs.NewID(), "state")
	if _, err := bl.obj.Put(ctx, jetstream.ObjectMeta{Name: old}, bytes.NewReader(data)); err != nil {
		b.Fatal(err)
	}
	st, err := be.js.Stream(ctx, bl.stream)
	if err != nil {
		b.Fatal(err)
	}
	b.Run("chunks=128KiB/GetMsg", func(b *testing.B) {
		b.SetBytes(int64(len(data)))
		for range b.N {
			info, err := bl.obj.GetInfo(ctx, old)
			if err != nil {
				b.Fatal(err)
			}
			subject := "$O." + bl.bucket + ".C." + info.NUID
			got := make([]byte, 0, info.Size)
			seq := uint64(1)
			for range info.Chunks {
				m, err := st.GetMsg(ctx, seq, jetstream.WithGetMsgSubject(subject))
				if err != nil {
					b.Fatal(err)
				}
				got = append(got, m.Data...)
				seq = m.Sequence + 1
			}
			if len(got) != len(data) {
				b.Fatal("short read")
			}
		}
	})
	for _, c := range []struct{ name, key string }{{"chunks=128KiB/Get", old}, {"chunks=512KiB/Get", key}} {
		b.Run(c.name, func(b *testing.B) {
			b.SetBytes(int64(len(data)))
			for range b.N {
				rc, err := bl.Get(ctx, c.key)
				if err != nil {
					b.Fatal(err)
				}
				rc.Close()
			}
		})
	}
}

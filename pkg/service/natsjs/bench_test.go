package natsjs

import (
	"context"
	"fmt"
	"net/http"
	"strings"
	"syscall"
	"testing"
	"time"
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

// Command mottle-bench compares Mottle with outside references and writes
// the report that README quotes:
//
//   - speed: Mottle and OpenCV's per-subset findTransformECC loop on the
//     same rendered pairs and points in the same run, points per second,
//     their ratio, error against the exact truth and peak memory of each
//     process;
//   - accuracy: the cross-check tables against OpenCV and scikit-image;
//   - the DIC Challenge 2.0 noise / spatial-resolution protocol on
//     rendered star images (and on real ones if MOTTLE_CHALLENGE_DIR is
//     set), as a table and a PNG plot.
//
// Usage:
//
//	mottle-bench [-out DIR] [-quick] [-stereo] [-speed]
//
// It needs Debian's /usr/bin/python3 with python3-opencv, python3-skimage,
// python3-scipy and python3-numpy, and must run inside the source tree
// (it calls scripts/ref_*.py). scripts/bench is the usual way to run it.
package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/exec"
	"os/signal"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"strings"
	"sync"
	"time"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/verify"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()
	if err := run(ctx, os.Args[1:], os.Stdout); err != nil {
		fmt.Fprintln(os.Stderr, "mottle-bench:", err)
		os.Exit(1)
	}
}

func run(ctx context.Context, args []string, stdout io.Writer) error {
	fs := flag.NewFlagSet("mottle-bench", flag.ContinueOnError)
	out := fs.String("out", "", "directory for bench.md, crosscheck.md, challenge.md and challenge.png (default: print only)")
	quick := fs.Bool("quick", false, "one small pair only (for a smoke test)")
	worker := fs.String("worker", "", "internal: run Mottle on this request file and print the response")
	threads := fs.Int("threads", 0, "internal, with -worker: correlation threads (0 = all cores)")
	stereoOnly := fs.Bool("stereo", false, "only the stereo speed section (written to stereo.md with -out)")
	speedOnly := fs.Bool("speed", false, "only the speed section (bench.md): no cross-checks, no challenge")
	if err := fs.Parse(args); err != nil {
		return err
	}
	if *stereoOnly {
		var b strings.Builder
		w := io.MultiWriter(stdout, &b)
		fmt.Fprintf(w, "Measured %s on %s.\n", time.Now().UTC().Format("2006-01-02 15:04 UTC"), machine())
		if err := stereoSpeed(ctx, w, *quick); err != nil {
			return err
		}
		if *out != "" {
			if err := os.MkdirAll(*out, 0o755); err != nil {
				return err
			}
		}
		return save(*out, "stereo.md", b.String())
	}
	if *worker != "" {
		return runWorker(ctx, *worker, *threads, stdout)
	}
	if err := verify.CheckPython(ctx, verify.Python); err != nil {
		return err
	}
	scripts, err := verify.FindScripts(".")
	if err != nil {
		return err
	}
	tmp, err := os.MkdirTemp("", "mottle-bench-")
	if err != nil {
		return err
	}
	defer os.RemoveAll(tmp)
	runner := verify.Runner{Scripts: scripts, Dir: tmp}
	if *out != "" {
		if err := os.MkdirAll(*out, 0o755); err != nil {
			return err
		}
	}
	var report strings.Builder
	w := io.MultiWriter(stdout, &report)
	fmt.Fprintf(w, "Measured %s on %s.\n\n", time.Now().UTC().Format("2006-01-02 15:04 UTC"), machine())

	// 1. Speed and accuracy on the same points.
	cases := verify.BenchCases()
	if *quick {
		cases = cases[:1]
		cases[0].Size, cases[0].Step = 160, 16
	}
	var rows []verify.BenchRow
	for _, c := range cases {
		rs, err := benchCase(ctx, c, runner, tmp)
		if err != nil {
			return err
		}
		rows = append(rows, rs...)
	}
	fmt.Fprintln(w, verify.BenchTable(rows))
	w1, c1 := verify.SpeedRatio(rows, mottleLabel(1))
	wn, cn := verify.SpeedRatio(rows, mottleLabel(0))
	fmt.Fprintf(w, "Mottle / OpenCV ECC with its default stop, geometric mean over the pairs: one thread each %.1f× in points/s, %.1f× in points per CPU second; all %d cores each (ECC: one process per core on its share of the points) %.1f× in points/s, %.1f× per CPU second.\n",
		w1, c1, runtime.NumCPU(), wn, cn)
	fmt.Fprintln(w, "\npoints/s counts the per-point work only (Mottle: spline prefilter, seed search, IC-GN and propagation; OpenCV: matchTemplate ±4 px plus findTransformECC per subset, driven from Python; default stop = OpenCV's 50 iterations / Δρ < 1e-3, tight stop = 200 / 1e-8 as in the cross-checks); points/CPU-s divides by the CPU time (user and system, every thread or process) of that work, which other processes on a shared machine do not inflate as they do wall time; process wall and peak RSS are the whole child process (interpreter start, imports, image decoding; for one process per core the longest and the sum). Each figure is one run: on a shared machine expect ±20 % run to run in points/s, less per CPU second.")
	if err := stereoSpeed(ctx, w, *quick); err != nil {
		return err
	}
	if err := save(*out, "bench.md", report.String()); err != nil {
		return err
	}
	if *speedOnly {
		return nil
	}

	// 2. Cross-check tables.
	var xs []*verify.CaseResult
	crossCases := verify.CrossCases(*quick)
	for _, c := range crossCases {
		r, err := verify.CrossCheck(ctx, c, runner, verify.MottleTracker(correlate.Options{}), tmp)
		if err != nil {
			return err
		}
		xs = append(xs, r)
	}
	xt := verify.CrossCheckTable(xs)
	fmt.Fprintln(stdout, "\nCross-check against the exact truth (160×160 px, 8-bit):")
	fmt.Fprintln(stdout, xt)
	if err := save(*out, "crosscheck.md", xt); err != nil {
		return err
	}

	// 3. DIC Challenge 2.0 protocol.
	set, err := verify.StarRender{Seed: 7}.Render()
	if err != nil {
		return err
	}
	first, err := verify.Challenge(ctx, set, verify.MottleTracker(correlate.Options{}), verify.ChallengeOptions{ImageNoise: 2})
	if err != nil {
		return err
	}
	second, err := verify.Challenge(ctx, set, verify.MottleTracker(correlate.Options{Shape: correlate.Second}),
		verify.ChallengeOptions{ImageNoise: 2, Order: 2, Subsets: []int{21, 31, 41, 51}})
	if err != nil {
		return err
	}
	var ct strings.Builder
	fmt.Fprintf(&ct, "Rendered star images: 2000×128 px, 8-bit, noise σ = 2 grey levels, A = 0.5 px, period 10→300 px linear in x.\n\n")
	fmt.Fprintf(&ct, "%s\n\n", verify.ChallengeNotes)
	fmt.Fprintf(&ct, "First-order subsets:\n\n%s\n\nSecond-order subsets:\n\n%s\n", verify.ChallengeTable(first), verify.ChallengeTable(second))
	series := []verify.Series{{Label: "Mottle, first order (rendered)", Results: first}, {Label: "Mottle, second order (rendered)", Results: second}}
	if dir := os.Getenv(verify.ChallengeEnv); dir != "" {
		rset, noise, err := verify.LoadChallengeDir(dir)
		if err != nil {
			return err
		}
		real, err := verify.Challenge(ctx, rset, verify.MottleTracker(correlate.Options{}), verify.ChallengeOptions{ImageNoise: noise})
		if err != nil {
			return err
		}
		fmt.Fprintf(&ct, "\nReal images from %s, first-order subsets:\n\n%s\n", dir, verify.ChallengeTable(real))
		series = append(series, verify.Series{Label: "Mottle, first order (real images)", Results: real})
	} else {
		fmt.Fprintf(&ct, "\nReal DIC Challenge 2.0 images: not run (%s is not set).\n", verify.ChallengeEnv)
	}
	fmt.Fprintln(stdout, "\nDIC Challenge 2.0 protocol:")
	fmt.Fprintln(stdout, ct.String())
	if err := save(*out, "challenge.md", ct.String()); err != nil {
		return err
	}
	if *out != "" {
		if err := verify.PlotChallenge(filepath.Join(*out, "challenge.png"), "DIC Challenge 2.0 protocol: noise vs spatial resolution", series...); err != nil {
			return err
		}
		fmt.Fprintf(stdout, "wrote %s\n", *out)
	}
	return nil
}

func mottleLabel(threads int) string {
	if threads == 0 {
		return fmt.Sprintf("Mottle IC-GN (%d threads)", runtime.NumCPU())
	}
	return fmt.Sprintf("Mottle IC-GN (%d thread)", threads)
}

// benchCase renders c, then runs Mottle (1 thread and all cores, each in a
// child process) and the OpenCV ECC driver on the same files and points.
func benchCase(ctx context.Context, c verify.BenchCase, runner verify.Runner, tmp string) ([]verify.BenchRow, error) {
	ref, def, err := c.Files(tmp)
	if err != nil {
		return nil, err
	}
	pts, truth := c.Points()
	req := verify.Request{Reference: ref, Deformed: def, Subset: c.Subset, Search: 4, Points: pts}
	var rows []verify.BenchRow
	for _, th := range []int{1, 0} {
		resp, err := mottleChild(ctx, req, th, tmp)
		if err != nil {
			return nil, err
		}
		row, err := verify.RowFrom(c, mottleLabel(th), resp, truth)
		if err != nil {
			return nil, err
		}
		rows = append(rows, row)
	}
	for _, e := range []struct {
		label string
		m     verify.Method
		procs int
	}{{verify.ECCLabel, verify.ECCDefault, 1}, {verify.ECC2Label, verify.ECCDefault, runtime.NumCPU()}, {verify.ECCTightLabel, verify.ECC, 1}} {
		req.Method = e.m
		resp, err := runParallel(ctx, runner, req, e.procs)
		if err != nil {
			return nil, err
		}
		row, err := verify.RowFrom(c, e.label, resp, truth)
		if err != nil {
			return nil, err
		}
		rows = append(rows, row)
	}
	return rows, nil
}

// runParallel runs the driver of req in procs processes at once, each on
// a contiguous share of the points, and joins their answers: points in
// order, loop time and process wall the longest, CPU time and peak memory
// the sums.
func runParallel(ctx context.Context, runner verify.Runner, req verify.Request, procs int) (*verify.Response, error) {
	procs = max(1, min(procs, len(req.Points)))
	resps := make([]*verify.Response, procs)
	errs := make([]error, procs)
	var wg sync.WaitGroup
	for i := range procs {
		part := req
		part.Points = req.Points[len(req.Points)*i/procs : len(req.Points)*(i+1)/procs]
		if req.Guess != nil {
			part.Guess = req.Guess[len(req.Points)*i/procs : len(req.Points)*(i+1)/procs]
		}
		wg.Go(func() { resps[i], errs[i] = runner.Run(ctx, part) })
	}
	wg.Wait()
	if err := errors.Join(errs...); err != nil {
		return nil, err
	}
	out := *resps[0]
	out.Points = nil
	out.Seconds, out.CPUSeconds, out.Wall, out.PeakRSS = 0, 0, 0, 0
	for _, r := range resps {
		out.Points = append(out.Points, r.Points...)
		out.Seconds = max(out.Seconds, r.Seconds)
		out.Wall = max(out.Wall, r.Wall)
		out.CPUSeconds += r.CPUSeconds
		out.PeakRSS += r.PeakRSS
	}
	return &out, nil
}

// mottleChild runs this program with -worker on req and returns its
// response, with the child's wall time and peak memory.
func mottleChild(ctx context.Context, req verify.Request, threads int, tmp string) (*verify.Response, error) {
	self, err := os.Executable()
	if err != nil {
		return nil, err
	}
	f, err := os.CreateTemp(tmp, "mottle-req-*.json")
	if err != nil {
		return nil, err
	}
	if err := json.NewEncoder(f).Encode(req); err != nil {
		f.Close()
		return nil, err
	}
	if err := f.Close(); err != nil {
		return nil, err
	}
	cmd := exec.CommandContext(ctx, self, "-worker", f.Name(), "-threads", fmt.Sprint(threads))
	var stdout, stderr strings.Builder
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	start := time.Now()
	if err := cmd.Run(); err != nil {
		return nil, fmt.Errorf("mottle worker: %w: %s", err, stderr.String())
	}
	wall := time.Since(start)
	var resp verify.Response
	if err := json.Unmarshal([]byte(stdout.String()), &resp); err != nil {
		return nil, fmt.Errorf("mottle worker output: %w", err)
	}
	resp.Wall, resp.PeakRSS = wall, verify.PeakRSS(cmd.ProcessState)
	return &resp, nil
}

func runWorker(ctx context.Context, path string, threads int, stdout io.Writer) error {
	b, err := os.ReadFile(path)
	if err != nil {
		return err
	}
	var req verify.Request
	if err := json.Unmarshal(b, &req); err != nil {
		return fmt.Errorf("request %s: %w", path, err)
	}
	resp, err := verify.MottleResponse(ctx, req, correlate.Options{Threads: threads})
	if err != nil {
		return err
	}
	return json.NewEncoder(stdout).Encode(resp)
}

func save(dir, name, text string) error {
	if dir == "" {
		return nil
	}
	return os.WriteFile(filepath.Join(dir, name), []byte(strings.TrimSpace(text)+"\n"), 0o644)
}

// machine describes the computer and the build: CPU model, core count,
// OS/arch, Go, and the GOAMD64 level and experiments the binary was built
// with.
func machine() string {
	cpu := "unknown CPU"
	if b, err := os.ReadFile("/proc/cpuinfo"); err == nil {
		for _, l := range strings.Split(string(b), "\n") {
			if k, v, ok := strings.Cut(l, ":"); ok && strings.TrimSpace(k) == "model name" {
				cpu = strings.TrimSpace(v)
				break
			}
		}
	}
	build := ""
	if bi, ok := debug.ReadBuildInfo(); ok {
		for _, st := range bi.Settings {
			if st.Key == "GOAMD64" || st.Key == "GOEXPERIMENT" {
				build += ", " + st.Key + "=" + st.Value
			}
		}
	}
	return fmt.Sprintf("%s, %d cores, %s/%s, %s%s", cpu, runtime.NumCPU(), runtime.GOOS, runtime.GOARCH, runtime.Version(), build)
}

package service_test

import (
	"bytes"
	"context"
	"errors"
	"image"
	"io"
	"log/slog"
	"math/rand/v2"
	"net/http/httptest"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/embedded"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// smallFS mounts a tmpfs of size bytes on a new temporary directory and
// unmounts it when the test ends. A real file system that runs out of
// space is the only honest way to see what the kernel, bbolt's page
// writes and the blob files do on ENOSPC; a fake writer would only
// return the error where the fake decides to. Mounting needs root: the
// test runs as root here and in CI (same machine); elsewhere it fails
// with this message rather than skipping.
func smallFS(t *testing.T, size string) string {
	t.Helper()
	dir := t.TempDir()
	out, err := exec.Command("mount", "-t", "tmpfs", "-o", "size="+size+",mode=0700", "tmpfs", dir).CombinedOutput()
	if err != nil {
		t.Fatalf("mount a %s tmpfs on %s for the full-disk test: %v (%s); this test needs root (or CAP_SYS_ADMIN) and the mount command: run it as root, as CI does",
			size, dir, err, strings.TrimSpace(string(out)))
	}
	t.Cleanup(func() {
		if out, err := exec.Command("umount", dir).CombinedOutput(); err != nil {
			t.Errorf("umount %s: %v (%s)", dir, err, out)
		}
	})
	return dir
}

// freeOn returns the bytes free on the file system of dir.
func freeOn(t *testing.T, dir string) int64 {
	t.Helper()
	var st syscall.Statfs_t
	if err := syscall.Statfs(dir, &st); err != nil {
		t.Fatal(err)
	}
	return int64(st.Bavail) * int64(st.Bsize)
}

// fill writes a file of n bytes (or until the disk is full when n < 0)
// to path.
func fill(t *testing.T, path string, n int64) {
	t.Helper()
	f, err := os.OpenFile(path, os.O_CREATE|os.O_WRONLY|os.O_APPEND, 0o600)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	buf := bytes.Repeat([]byte{0xa5}, 4096)
	for left := n; n < 0 || left > 0; left -= int64(len(buf)) {
		k := len(buf)
		if n >= 0 {
			k = int(min(left, int64(k)))
		}
		if _, err := f.Write(buf[:k]); err != nil {
			if n < 0 && errors.Is(err, syscall.ENOSPC) {
				return
			}
			t.Fatalf("fill %s: %v", path, err)
		}
	}
}

// noisePNG is a w×h PNG of uniform random grey levels: it does not
// compress, so its size on disk is about w·h bytes.
func noisePNG(t *testing.T, w, h int, seed uint64) []byte {
	r := rand.New(rand.NewPCG(seed, 3))
	img := image.NewGray(image.Rect(0, 0, w, h))
	for i := range img.Pix {
		img.Pix[i] = uint8(r.UintN(256))
	}
	return encodePNG(t, img)
}

// TestFullDisk runs the service on a 4 MiB file system and fills it: an
// upload that does not fit is answered 507 and leaves nothing behind;
// below the free-space threshold /readyz is not ready and uploads are
// refused; a job whose results find the disk full fails with the reason;
// nothing stored before changes; and when space returns the same process
// takes work again. Reopening the data directory at the end shows that
// the job database was not damaged.
func TestFullDisk(t *testing.T) {
	dir := smallFS(t, "4m")
	const minFree, reserve = 512 << 10, 256 << 10
	be, err := embedded.Open(dir, 16)
	if err != nil {
		t.Fatal(err)
	}
	h := newHolder()
	h.free.Store(1) // the first job runs at once
	s, err := service.New(service.Config{Backend: be, Analyzer: &fakeAnalyzer{}, Workers: 1,
		Logger: slog.New(slog.NewJSONHandler(io.Discard, nil)), ShutdownGrace: 5 * time.Second,
		DataDir: dir, MinFreeBytes: minFree, ReserveBytes: reserve, BeforeCompute: h.hook})
	if err != nil {
		t.Fatal(err)
	}
	stop, err := s.Start(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	hs := httptest.NewServer(s.Handler())
	closed := false
	shut := func() {
		if !closed {
			closed = true
			h.release()
			hs.Close()
			stop()
			be.Close()
		}
	}
	t.Cleanup(shut)
	ts := &testServer{Server: hs, srv: s}
	if _, err := os.Stat(filepath.Join(dir, ".mottle-reserve")); err != nil {
		t.Fatalf("no reserve file after start: %v", err)
	}
	ready := func(want int) problemDoc {
		t.Helper()
		resp, b := ts.do(t, "GET", "/readyz", "", nil)
		if resp.StatusCode != want {
			t.Fatalf("/readyz = %d %s, want %d (free %d B)", resp.StatusCode, b, want, freeOn(t, dir))
		}
		if want != 200 {
			return decodeJSON[problemDoc](t, b)
		}
		return problemDoc{}
	}
	submit := func(ref, def []byte) (int, []byte) {
		ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 15, "step": 8}`)...)
		resp, b := ts.do(t, "POST", "/v1/analyses", ct, body)
		return resp.StatusCode, b
	}
	ref, def := pair(t, 64, 64, 1, 0, 1)

	// A job that succeeds before the disk fills: its results must not change.
	code, b := submit(ref, def)
	if code != 202 {
		t.Fatalf("first submission: %d %s", code, b)
	}
	first := decodeJSON[jobDoc](t, b)
	h.next(t) // let through (free = 1)
	if j := ts.waitDone(t, "/v1/analyses/"+first.ID); j.State != "succeeded" {
		t.Fatalf("first job %s: %+v", j.State, j.Error)
	}
	files := map[string][]byte{}
	for _, name := range []string{"field.json", "field.csv", "images/reference.png"} {
		resp, b := ts.do(t, "GET", "/v1/analyses/"+first.ID+"/"+name, "", nil)
		if resp.StatusCode != 200 {
			t.Fatalf("GET %s: %d", name, resp.StatusCode)
		}
		files[name] = b
	}
	ready(200)

	// 1. An upload bigger than the space left (but above the threshold):
	// 507 with a problem document, no job, no stored input left behind.
	filler := filepath.Join(dir, "filler")
	fill(t, filler, freeOn(t, dir)-(1536<<10))
	big1, big2 := noisePNG(t, 1024, 1024, 1), noisePNG(t, 1024, 1024, 2)
	code, b = submit(big1, big2)
	if code != 507 {
		t.Fatalf("upload larger than the free space: %d %s, want 507", code, b)
	}
	if p := decodeJSON[problemDoc](t, b); p.Type != "urn:mottle:problem:insufficient-storage" || !strings.Contains(p.Detail, "storage is full") {
		t.Fatalf("507 problem: %+v", p)
	}
	_, b = ts.do(t, "GET", "/v1/analyses", "", nil)
	if n := strings.Count(string(b), `"id"`); n != 1 {
		t.Fatalf("after the refused upload the list has %d analyses, want 1: %s", n, b)
	}
	var left []string
	filepath.WalkDir(filepath.Join(dir, "blobs", "jobs"), func(p string, d os.DirEntry, err error) error {
		if err == nil && !d.IsDir() && !strings.Contains(p, first.ID) {
			left = append(left, p)
		}
		return nil
	})
	if len(left) > 0 {
		t.Fatalf("the refused upload left files behind: %v", left)
	}

	// 2. Below the threshold: not ready, uploads refused before the body
	// is read, the free space in /metrics.
	fill(t, filler, freeOn(t, dir)-(minFree/2))
	if p := ready(503); p.Type != "urn:mottle:problem:low-disk-space" {
		t.Fatalf("/readyz problem below the threshold: %+v", p)
	}
	code, b = submit(ref, def)
	if code != 507 || !strings.Contains(string(b), "low-disk-space") {
		t.Fatalf("upload below the threshold: %d %s, want 507 low-disk-space", code, b)
	}
	_, b = ts.do(t, "GET", "/metrics", "", nil)
	free := metricValue(t, string(b), "mottle_data_free_bytes")
	if free < 0 || free >= minFree {
		t.Fatalf("mottle_data_free_bytes = %v below the threshold of %d", free, minFree)
	}
	if metricValue(t, string(b), "mottle_storage_full_total") < 1 {
		t.Fatal("mottle_storage_full_total did not count the failed write")
	}

	// 3. Space returns: ready again and the reserve is made again, in
	// the same process.
	if err := os.Remove(filler); err != nil {
		t.Fatal(err)
	}
	ready(200)
	_, b = ts.do(t, "GET", "/metrics", "", nil)
	if v := metricValue(t, string(b), "mottle_data_reserve_bytes"); v != reserve {
		t.Fatalf("mottle_data_reserve_bytes = %v after space returned, want %d", v, reserve)
	}

	// 4. The disk fills while a job runs: storing its results fails; the
	// reserve gives the room to record that it failed, and why.
	code, b = submit(ref, def)
	if code != 202 {
		t.Fatalf("submission after space returned: %d %s", code, b)
	}
	second := decodeJSON[jobDoc](t, b)
	if id := h.next(t); id != second.ID {
		t.Fatalf("held %s, want %s", id, second.ID)
	}
	fill(t, filler, -1)
	h.release()
	j := ts.waitDone(t, "/v1/analyses/"+second.ID)
	if j.State != "failed" || j.Error == nil || j.Error.Title != "Insufficient storage" || !strings.Contains(j.Error.Detail, "storage is full") {
		t.Fatalf("job whose results found the disk full: %s %+v", j.State, j.Error)
	}
	_, b = ts.do(t, "GET", "/metrics", "", nil)
	if v := metricValue(t, string(b), "mottle_data_reserve_bytes"); v != 0 {
		t.Fatalf("mottle_data_reserve_bytes = %v after a write found the disk full, want 0 (given up)", v)
	}
	for name, want := range files {
		resp, b := ts.do(t, "GET", "/v1/analyses/"+first.ID+"/"+name, "", nil)
		if resp.StatusCode != 200 || !bytes.Equal(b, want) {
			t.Fatalf("%s of the earlier job changed on the full disk: %d, %d bytes, want %d", name, resp.StatusCode, len(b), len(want))
		}
	}

	// 5. Space returns again: a new job succeeds without a restart.
	if err := os.Remove(filler); err != nil {
		t.Fatal(err)
	}
	ready(200)
	code, b = submit(ref, def)
	if code != 202 {
		t.Fatalf("submission after the second recovery: %d %s", code, b)
	}
	third := decodeJSON[jobDoc](t, b)
	if j := ts.waitDone(t, "/v1/analyses/"+third.ID); j.State != "succeeded" {
		t.Fatalf("job after recovery: %s %+v", j.State, j.Error)
	}

	// The data directory opens again with every record as it was.
	shut()
	be2, err := embedded.Open(dir, 16)
	if err != nil {
		t.Fatalf("reopen the data directory after the full disk: %v", err)
	}
	defer be2.Close()
	want := map[string]jobs.State{first.ID: jobs.Succeeded, second.ID: jobs.Failed, third.ID: jobs.Succeeded}
	list, err := be2.Store.Jobs(context.Background(), jobs.Filter{})
	if err != nil {
		t.Fatal(err)
	}
	if len(list) != len(want) {
		t.Fatalf("reopened store has %d jobs, want %d", len(list), len(want))
	}
	for _, j := range list {
		if want[j.ID] != j.State {
			t.Errorf("reopened job %s is %s, want %s", j.ID, j.State, want[j.ID])
		}
	}
	rc, err := be2.Blobs.Get(context.Background(), jobs.ResultKey(first.ID, "field.json"))
	if err != nil {
		t.Fatal(err)
	}
	got, _ := io.ReadAll(rc)
	rc.Close()
	if !bytes.Equal(got, files["field.json"]) {
		t.Fatal("field.json of the first job changed on disk")
	}
}

// metricValue returns the value of the unlabelled metric name in a
// Prometheus text exposition.
func metricValue(t *testing.T, text, name string) float64 {
	t.Helper()
	for _, line := range strings.Split(text, "\n") {
		if v, ok := strings.CutPrefix(line, name+" "); ok {
			f, err := strconv.ParseFloat(v, 64)
			if err != nil {
				t.Fatalf("metric %s: %v", name, err)
			}
			return f
		}
	}
	t.Fatalf("no metric %s in /metrics", name)
	return 0
}

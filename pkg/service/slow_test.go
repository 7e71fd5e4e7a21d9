package service_test

import (
	"bufio"
	"context"
	"fmt"
	"io"
	"log/slog"
	"net"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/embedded"
)

// TestSlowClients serves on a real listener with the production
// timeouts made short, and plays four broken clients: headers sent a
// byte at a time (slow loris), a body trickled below the minimum rate,
// an upload cut off half way, and an event stream left by its client.
// Each must end on the server's side (the connection closed or answered,
// the request no longer in flight) without leaving a job or a stored
// file, and a job that was running meanwhile must finish. The times are
// logged for README, not asserted; the test's own waits are bounds that
// turn a hang into a failure.
func TestSlowClients(t *testing.T) {
	dir := t.TempDir()
	be, err := embedded.Open(dir, 16)
	if err != nil {
		t.Fatal(err)
	}
	h := newHolder()
	const headerTimeout, grace = 300 * time.Millisecond, 300 * time.Millisecond
	s, err := service.New(service.Config{Backend: be, Analyzer: &fakeAnalyzer{}, Workers: 1,
		Logger: slog.New(slog.NewJSONHandler(io.Discard, nil)), ShutdownGrace: 5 * time.Second,
		ReadHeaderTimeout: headerTimeout, ReadTimeout: 30 * time.Second,
		MinBodyRate: 16 << 10, BodyRateGrace: grace, BeforeCompute: h.hook})
	if err != nil {
		t.Fatal(err)
	}
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	served := make(chan error, 1)
	go func() { served <- s.Serve(ctx, ln) }()
	t.Cleanup(func() {
		h.release()
		cancel()
		<-served
		be.Close()
	})
	addr := ln.Addr().String()
	ts := &testServer{Server: newClientOnly("http://" + addr)}
	bound := 20 * time.Second // the test's own limit on each wait

	// closedWithin reads from c until the server answers or closes it,
	// and returns the first line read and the time taken.
	closedWithin := func(c net.Conn, start time.Time) (string, time.Duration) {
		t.Helper()
		c.SetReadDeadline(time.Now().Add(bound))
		br := bufio.NewReader(c)
		line, err := br.ReadString('\n')
		if ne, ok := err.(net.Error); ok && ne.Timeout() {
			t.Fatalf("the server kept the connection open for %v", bound)
		}
		took := time.Since(start)
		if line != "" {
			c.SetReadDeadline(time.Now().Add(time.Second))
			rest, _ := io.ReadAll(br)
			t.Logf("answer: %s%s", line, rest)
		}
		return strings.TrimSpace(line), took
	}
	inFlight := func() float64 {
		_, b := ts.do(t, "GET", "/metrics", "", nil)
		return metricValue(t, string(b), "mottle_http_requests_in_flight")
	}
	noJobs := func(what string) {
		t.Helper()
		_, b := ts.do(t, "GET", "/v1/analyses", "", nil)
		if strings.Contains(string(b), `"id"`) {
			t.Fatalf("%s left a job: %s", what, b)
		}
		var files []string
		filepath.WalkDir(filepath.Join(dir, "blobs"), func(p string, d os.DirEntry, err error) error {
			if err == nil && !d.IsDir() {
				files = append(files, p)
			}
			return nil
		})
		if len(files) > 0 {
			t.Fatalf("%s left stored files: %v", what, files)
		}
	}

	// 1. Slow loris: a header line a byte at a time.
	c, err := net.Dial("tcp", addr)
	if err != nil {
		t.Fatal(err)
	}
	start := time.Now()
	stopDrip := make(chan struct{})
	go func() {
		msg := "POST /v1/analyses HTTP/1.1\r\nHost: x\r\nX-Slow: " + strings.Repeat("a", 1000)
		for i := 0; i < len(msg); i++ {
			select {
			case <-stopDrip:
				return
			case <-time.After(20 * time.Millisecond):
			}
			if _, err := c.Write([]byte{msg[i]}); err != nil {
				return
			}
		}
	}()
	_, took := closedWithin(c, start)
	close(stopDrip)
	c.Close()
	t.Logf("slow-loris headers: connection closed after %v (ReadHeaderTimeout %v)", took.Round(time.Millisecond), headerTimeout)

	// 2. A body trickled at about 200 B/s, below 16 KiB/s.
	ref, def := pair(t, 64, 64, 1, 0, 3)
	ct, body := multipartBody(t, analysisParts(ref, def, "")...)
	c, err = net.Dial("tcp", addr)
	if err != nil {
		t.Fatal(err)
	}
	fmt.Fprintf(c, "POST /v1/analyses HTTP/1.1\r\nHost: x\r\nContent-Type: %s\r\nContent-Length: %d\r\n\r\n", ct, len(body))
	start = time.Now()
	go func() {
		for i := 0; i < len(body); i += 20 {
			if _, err := c.Write(body[i:min(i+20, len(body))]); err != nil {
				return
			}
			time.Sleep(100 * time.Millisecond)
		}
	}()
	line, took := closedWithin(c, start)
	c.Close()
	if !strings.Contains(line, "408") {
		t.Fatalf("trickled body answered %q, want 408", line)
	}
	t.Logf("trickled body (≈200 B/s, minimum 16 KiB/s after %v): %s after %v", grace, line, took.Round(time.Millisecond))
	noJobs("the trickled body")

	// 3. An upload cut off half way.
	c, err = net.Dial("tcp", addr)
	if err != nil {
		t.Fatal(err)
	}
	fmt.Fprintf(c, "POST /v1/analyses HTTP/1.1\r\nHost: x\r\nContent-Type: %s\r\nContent-Length: %d\r\n\r\n", ct, len(body))
	c.Write(body[:len(body)/2])
	c.Close()
	start = time.Now()
	poll(t, "the cut-off upload to end", func() bool { return inFlight() == 1 }) // 1: this /metrics request
	t.Logf("upload cut off half way: request ended %v after the close", time.Since(start).Round(time.Millisecond))
	noJobs("the cut-off upload")

	// 4. An event stream left by its client while its job runs.
	code, b := ts.do(t, "POST", "/v1/analyses", ct, body)
	if code.StatusCode != 202 {
		t.Fatalf("submit: %d %s", code.StatusCode, b)
	}
	id := decodeJSON[jobDoc](t, b).ID
	h.next(t)
	c, err = net.Dial("tcp", addr)
	if err != nil {
		t.Fatal(err)
	}
	fmt.Fprintf(c, "GET /v1/analyses/%s/events HTTP/1.1\r\nHost: x\r\n\r\n", id)
	c.SetReadDeadline(time.Now().Add(bound))
	first, err := bufio.NewReader(c).ReadString('\n')
	if err != nil || !strings.Contains(first, "200") {
		t.Fatalf("event stream: %q %v", first, err)
	}
	if n := inFlight(); n != 2 {
		t.Fatalf("requests in flight with the stream open = %v, want 2", n)
	}
	c.Close()
	start = time.Now()
	poll(t, "the left event stream to end", func() bool { return inFlight() == 1 })
	t.Logf("event stream left by its client: ended %v after the close", time.Since(start).Round(time.Millisecond))
	h.release()
	if j := ts.waitDone(t, "/v1/analyses/"+id); j.State != "succeeded" {
		t.Fatalf("the job behind the left stream: %s %+v", j.State, j.Error)
	}
}

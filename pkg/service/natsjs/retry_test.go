package natsjs

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"mime/multipart"
	"net/http"
	"net/http/httptest"
	"net/textproto"
	"os"
	"strings"
	"syscall"
	"testing"

	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// post sends a POST with an optional Idempotency-Key and returns the
// status and body; a transport error fails the test.
func post(t testing.TB, ctx context.Context, url, ctype, key string, body []byte) (int, []byte) {
	t.Helper()
	req, _ := http.NewRequestWithContext(ctx, "POST", url, bytes.NewReader(body))
	req.Header.Set("Content-Type", ctype)
	if key != "" {
		req.Header.Set("Idempotency-Key", key)
	}
	res, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatalf("POST %s: %v", url, err)
	}
	defer res.Body.Close()
	b, _ := io.ReadAll(res.Body)
	return res.StatusCode, b
}

func seriesBody(t testing.TB, sc *scenario) (string, []byte) {
	var b bytes.Buffer
	mw := multipart.NewWriter(&b)
	h := textproto.MIMEHeader{}
	h.Set("Content-Disposition", `form-data; name="reference"; filename="reference.png"`)
	h.Set("Content-Type", "image/png")
	w, _ := mw.CreatePart(h)
	w.Write(sc.reference)
	h = textproto.MIMEHeader{}
	h.Set("Content-Disposition", `form-data; name="params"`)
	h.Set("Content-Type", "application/json")
	w, _ = mw.CreatePart(h)
	w.Write(sc.params)
	mw.Close()
	return mw.FormDataContentType(), b.Bytes()
}

// TestRetryOnNATS: on the NATS backend, a frame POST whose worker is
// SIGKILLed in the middle of the frame, and whose answer is lost (the
// client cuts the connection), is retried with its Idempotency-Key: the
// retry is answered with the one stored frame, computed by another
// worker, and the series' curve equals an undisturbed run's. The key
// records live in the bucket, so the API instance that answers the retry
// needs nothing in memory from the first request: a second API instance
// answers it.
func TestRetryOnNATS(t *testing.T) {
	sc := render(t, 3, 96)
	url := runServer(t)
	ctx := testCtx(t)
	api := func() string {
		b := open(t, url, func(o *Options) { o.Work = false; o.Logger = discardLogger() })
		srv, err := service.New(service.Config{Backend: b.Jobs(), Analyzer: service.Pipeline{}, Logger: discardLogger(), Workers: 1})
		if err != nil {
			t.Fatal(err)
		}
		stop, err := srv.Start(ctx)
		if err != nil {
			t.Fatal(err)
		}
		hs := httptest.NewServer(srv.Handler())
		t.Cleanup(func() { hs.Close(); stop() })
		return hs.URL
	}
	api1, api2 := api(), api()
	obs := open(t, url, func(o *Options) { o.Work = false; o.Logger = discardLogger() })
	held := startProc(t, "worker-hold", []string{workerEnv + "=" + url, holdFramesEnv + "=1"}, os.Args[0], "-test.run=^$")
	waitFor(t, "the holding worker", func() bool { return strings.Contains(held.out.String(), "computing up to") })

	ct, sbody := seriesBody(t, sc)
	st, b := post(t, ctx, api1+"/v1/series", ct, "nats-series", sbody)
	st2, b2 := post(t, ctx, api2+"/v1/series", ct, "nats-series", sbody)
	if st != 201 || st2 != 201 || idOf(t, b) != idOf(t, b2) {
		t.Fatalf("series and its repeat on another instance: %d %s / %d %s, want one series", st, b, st2, b2)
	}
	id := idOf(t, b)
	frameURL := func(api string, i int) string { return fmt.Sprintf("%s/v1/series/%s/frames?time=%d", api, id, i+1) }

	// Frame 0: held by the worker; the client waits for the answer.
	cctx, cut := context.WithCancel(ctx)
	lost := make(chan error, 1)
	go func() {
		req, _ := http.NewRequestWithContext(cctx, "POST", frameURL(api1, 0), bytes.NewReader(sc.frames[0]))
		req.Header.Set("Content-Type", "image/png")
		req.Header.Set("Idempotency-Key", "nats-frame-0")
		res, err := http.DefaultClient.Do(req)
		if err == nil {
			res.Body.Close()
		}
		lost <- err
	}()
	var first string
	waitFor(t, "the worker to start frame 0", func() bool {
		list, err := obs.Store().Jobs(ctx, jobs.Filter{Series: id})
		if err != nil || len(list) != 1 {
			return false
		}
		first = list[0].ID
		return started(held.out.String(), first)
	})
	held.signal(syscall.SIGKILL)
	<-held.done
	cut()
	if err := <-lost; err == nil {
		t.Fatal("frame 0 was answered; want the answer lost")
	}
	// A worker that computes everything takes the frame over.
	wb := open(t, url, func(o *Options) { o.Logger = discardLogger() })
	ws, err := service.New(service.Config{Backend: wb.Jobs(), Analyzer: service.Pipeline{}, Logger: discardLogger(), Workers: 1})
	if err != nil {
		t.Fatal(err)
	}
	wstop, err := ws.Start(ctx)
	if err != nil {
		t.Fatal(err)
	}
	defer wstop()

	st, b = post(t, ctx, frameURL(api2, 0), "image/png", "nats-frame-0", sc.frames[0])
	if st != 200 || idOf(t, b) != first || !strings.Contains(string(b), `"state": "succeeded"`) {
		t.Fatalf("retry of frame 0: %d %s, want 200 with the stored frame %s, succeeded", st, b, first)
	}
	if j, err := obs.Store().Job(ctx, first); err != nil || j.Attempts != 2 {
		t.Fatalf("frame 0: %+v, %v; want computed on a second attempt after the kill", j, err)
	}
	// The same key with another body is refused on any instance.
	if st, b := post(t, ctx, frameURL(api1, 1), "image/png", "nats-frame-0", sc.frames[1]); st != 422 {
		t.Fatalf("key of frame 0 with frame 1: %d %s, want 422", st, b)
	}
	for i := 1; i < len(sc.frames); i++ {
		if st, b := post(t, ctx, frameURL(api1, i), "image/png", fmt.Sprintf("nats-frame-%d", i), sc.frames[i]); st != 200 {
			t.Fatalf("frame %d: %d %s", i, st, b)
		}
	}
	list, err := obs.Store().Jobs(ctx, jobs.Filter{Series: id})
	if err != nil || len(list) != len(sc.frames) {
		t.Fatalf("series has %d frames (%v), want %d", len(list), err, len(sc.frames))
	}

	// The undisturbed run, without keys.
	st, b = post(t, ctx, api1+"/v1/series", ct, "", sbody)
	if st != 201 {
		t.Fatalf("second series: %d %s", st, b)
	}
	id2 := idOf(t, b)
	for i, f := range sc.frames {
		if st, b := post(t, ctx, fmt.Sprintf("%s/v1/series/%s/frames?time=%d", api1, id2, i+1), "image/png", "", f); st != 200 {
			t.Fatalf("undisturbed frame %d: %d %s", i, st, b)
		}
	}
	curve := func(sid string) string {
		res, err := http.Get(api1 + "/v1/series/" + sid + "/curve.csv")
		if err != nil {
			t.Fatal(err)
		}
		defer res.Body.Close()
		b, _ := io.ReadAll(res.Body)
		return string(b)
	}
	if got, want := curve(id), curve(id2); got != want || !strings.Contains(got, "frame_2") {
		t.Fatalf("curve after kill and retry:\n%s\nundisturbed:\n%s", got, want)
	}
}

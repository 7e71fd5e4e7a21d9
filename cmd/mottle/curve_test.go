package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"mime/multipart"
	"net/http"
	"net/http/httptest"
	"net/textproto"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/embedded"
)

// TestCurveCLIEqualsService: mottle series and the service, given the same
// frames and parameters, write the same curve.csv byte for byte (one curve
// format, pkg/series). Frames carry no time stamps here, so nothing may
// differ at all.
func TestCurveCLIEqualsService(t *testing.T) {
	dir := t.TempDir()
	if code, _, errs := runSynthArgs(t, "--out", dir, "--size", "112x88", "--motion", "affine:F11=1.015,F22=0.995",
		"--frames", "3", "--bits", "8"); code != 0 {
		t.Fatalf("synth: exit %d: %s", code, errs)
	}
	frames, err := filepath.Glob(filepath.Join(dir, "frame_*.png"))
	if err != nil || len(frames) != 3 {
		t.Fatalf("frames %v (%v)", frames, err)
	}
	out := filepath.Join(t.TempDir(), "cli")
	e, _, stderr := testEnv()
	if code := run(context.Background(), e, append([]string{"series", "--out", out, "--subset", "21", "--step", "8",
		"--ext", "axial:20,44,92,44", "--gauge", "mid:28,24,84,64", "--ref", filepath.Join(dir, "reference.png")}, frames...)); code != 0 {
		t.Fatalf("series: exit %d: %s", code, stderr.String())
	}
	cli, err := os.ReadFile(filepath.Join(out, "curve.csv"))
	if err != nil {
		t.Fatal(err)
	}

	be, err := embedded.Open(t.TempDir(), 16)
	if err != nil {
		t.Fatal(err)
	}
	srv, err := service.New(service.Config{Backend: be, Analyzer: service.Pipeline{}, Workers: 1,
		Logger: slog.New(slog.NewJSONHandler(io.Discard, nil)), ShutdownGrace: 5 * time.Second})
	if err != nil {
		t.Fatal(err)
	}
	stop, err := srv.Start(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	ts := httptest.NewServer(srv.Handler())
	defer func() { ts.Close(); stop(); be.Close() }()

	var body bytes.Buffer
	mw := multipart.NewWriter(&body)
	ref, err := os.ReadFile(filepath.Join(dir, "reference.png"))
	if err != nil {
		t.Fatal(err)
	}
	h := textproto.MIMEHeader{}
	h.Set("Content-Disposition", `form-data; name="reference"; filename="reference.png"`)
	h.Set("Content-Type", "image/png")
	pw, _ := mw.CreatePart(h)
	pw.Write(ref)
	params := `{"subset": 21, "step": 8, "extensometers": [{"name": "axial", "a": [20, 44], "b": [92, 44]}], "gauges": [{"name": "mid", "rect": [28, 24, 84, 64]}]}`
	if err := mw.WriteField("params", params); err != nil {
		t.Fatal(err)
	}
	mw.Close()
	resp, err := http.Post(ts.URL+"/v1/series", mw.FormDataContentType(), &body)
	if err != nil {
		t.Fatal(err)
	}
	b, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	if resp.StatusCode != http.StatusCreated {
		t.Fatalf("create series: %d %s", resp.StatusCode, b)
	}
	var sr struct{ ID string }
	if err := json.Unmarshal(b, &sr); err != nil {
		t.Fatal(err)
	}
	for _, f := range frames {
		img, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		url := fmt.Sprintf("%s/v1/series/%s/frames?wait=true&name=%s", ts.URL, sr.ID, filepath.Base(f))
		resp, err := http.Post(url, "image/png", bytes.NewReader(img))
		if err != nil {
			t.Fatal(err)
		}
		b, _ := io.ReadAll(resp.Body)
		resp.Body.Close()
		if resp.StatusCode != http.StatusOK {
			t.Fatalf("frame %s: %d %s", f, resp.StatusCode, b)
		}
	}
	resp, err = http.Get(ts.URL + "/v1/series/" + sr.ID + "/curve.csv")
	if err != nil {
		t.Fatal(err)
	}
	svc, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		t.Fatalf("curve.csv: %d %s", resp.StatusCode, svc)
	}
	if !bytes.Equal(cli, svc) {
		t.Errorf("curve.csv of the CLI and of the service differ:\nCLI:\n%s\nservice:\n%s", cli, svc)
	}
	if n := bytes.Count(cli, []byte("\n")); n != 5 || !bytes.Contains(cli, []byte("gauge_mid_E11_mean")) {
		t.Errorf("curve.csv has %d lines (want header, reference, 3 frames):\n%s", n, cli)
	}
}

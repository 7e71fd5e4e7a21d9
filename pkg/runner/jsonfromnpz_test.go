package runner

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"log/slog"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service/embedded"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// TestFrameJSONFromNPZ runs a series whose frames write field.npz and
// field.json, two at a time, and checks that the field.json rendered
// from each frame's stored field.npz (as the service renders a result on
// demand) is byte for byte the field.json the frame wrote.
func TestFrameJSONFromNPZ(t *testing.T) {
	const nFrames = 4
	ref, imgs, p := aheadSeries(t, nFrames)
	be, err := embedded.Open(t.TempDir(), 64)
	if err != nil {
		t.Fatal(err)
	}
	defer be.Close()
	ctx := context.Background()
	rn, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: 2, Logger: slog.New(slog.NewJSONHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	_, ids := submitSeries(t, be, ref, imgs, p, 2)
	for k, id := range ids { // with the frame metadata a frame's request may carry
		tm, load := 0.25*float64(k+1), 120.5*float64(k+1)
		if _, err := be.Store.UpdateJob(ctx, id, func(j *jobs.Job) error {
			j.Time, j.Load, j.Name = &tm, &load, fmt.Sprintf("coupon_%d.png", k+1)
			return nil
		}); err != nil {
			t.Fatal(err)
		}
	}
	stop, err := rn.Start(ctx)
	if err != nil {
		t.Fatal(err)
	}
	defer stop()
	deadline := time.Now().Add(2 * time.Minute)
	for _, id := range ids {
		var j *jobs.Job
		for time.Now().Before(deadline) {
			if j, err = be.Store.Job(ctx, id); err == nil && j.State.Terminal() {
				break
			}
			time.Sleep(20 * time.Millisecond)
		}
		if j == nil || j.State != jobs.Succeeded {
			t.Fatalf("frame %s: %+v %v", id, j, err)
		}
		open := func(n string) (io.ReadCloser, error) { return be.Blobs.Get(ctx, jobs.ResultKey(id, n)) }
		f, err := ReadStored(open)
		if err != nil {
			t.Fatal(err)
		}
		res, err := EncodeFormats(f, "json")
		if err != nil {
			t.Fatal(err)
		}
		rc, err := open("field.json")
		if err != nil {
			t.Fatal(err)
		}
		want, _ := io.ReadAll(rc)
		rc.Close()
		if !bytes.Contains(want, []byte(`"load_N"`)) || !bytes.Contains(want, []byte(`"time_s"`)) {
			t.Errorf("frame %d: field.json without the frame's time and load: %.300s", j.FrameIndex, want)
		}
		if got := res.Files["field.json"]; !bytes.Equal(got, want) {
			t.Errorf("frame %d: field.json from field.npz differs (%d bytes, written %d)\n%.300s\n%.300s", j.FrameIndex, len(got), len(want), got, want)
		}
	}
}

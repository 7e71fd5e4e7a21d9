package service

import (
	"context"
	"io"
	"log/slog"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service/embedded"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// heldDelivery is a delivery held by the frame gate; the gate only
// sends it heartbeats.
type heldDelivery struct{ id string }

func (d heldDelivery) ID() string        { return d.id }
func (d heldDelivery) Ack() error        { return nil }
func (d heldDelivery) Nak() error        { return nil }
func (d heldDelivery) InProgress() error { return nil }

// TestFrameGate checks the series order gate: a frame whose predecessor
// runs is held in place until the predecessor finishes, also past
// frameQueuedWait (put back, it would go behind the later frames of its
// series, and each of those would then wait its turn in the gate); a frame
// whose predecessor has not started is put back after frameQueuedWait,
// well before frameWait. The order rule (frame n after frame n−1) is the
// design of the service (DESIGN.md), not a published method.
func TestFrameGate(t *testing.T) {
	be, err := embedded.Open(t.TempDir(), 8)
	if err != nil {
		t.Fatal(err)
	}
	defer be.Close()
	s, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: 1, Logger: slog.New(slog.NewJSONHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	now := time.Now().UTC()
	ser := &jobs.Series{ID: jobs.NewID(), Params: []byte(`{}`), Width: 8, Height: 8, Created: now, Updated: now}
	ids := []string{jobs.NewID(), jobs.NewID(), jobs.NewID()}
	ser.Frames = ids
	if err := be.Store.CreateSeries(ctx, ser); err != nil {
		t.Fatal(err)
	}
	for i, id := range ids {
		j := &jobs.Job{ID: id, Kind: jobs.Frame, State: jobs.Queued, Series: ser.ID, FrameIndex: i, Created: now}
		if err := be.Store.CreateJob(ctx, j); err != nil {
			t.Fatal(err)
		}
	}
	setState := func(id string, st jobs.State) {
		t.Helper()
		if _, err := be.Store.UpdateJob(ctx, id, func(j *jobs.Job) error { j.State = st; return nil }); err != nil {
			t.Fatal(err)
		}
	}
	setState(ids[0], jobs.Succeeded)

	tests := []struct {
		prev jobs.State // state of frame 1
		want gate       // gate of frame 2
	}{
		{jobs.Queued, gateQueued},
		{jobs.Running, gateRunning},
		{jobs.Failed, gateOpen},
		{jobs.Succeeded, gateOpen},
	}
	for _, tc := range tests {
		setState(ids[1], tc.prev)
		if g := s.frameReady(ctx, ids[2]); g != tc.want {
			t.Errorf("frame 1 %s: gate of frame 2 = %d, want %d", tc.prev, g, tc.want)
		}
	}
	if g := s.frameReady(ctx, ids[1]); g != gateOpen {
		t.Errorf("frame 0 succeeded: gate of frame 1 = %d, want open", g)
	}

	// Predecessor not started: put back, long before frameWait.
	setState(ids[1], jobs.Queued)
	wctx, cancel := context.WithTimeout(ctx, frameWait/2)
	defer cancel()
	if s.waitPrevious(wctx, ids[2], heldDelivery{ids[2]}) || wctx.Err() != nil {
		t.Errorf("frame 1 queued: waitPrevious held frame 2 until %v (ctx %v), want put back after %v", frameWait/2, wctx.Err(), frameQueuedWait)
	}

	// Predecessor running for longer than frameQueuedWait: held until it
	// finishes.
	setState(ids[1], jobs.Running)
	res := make(chan bool, 1)
	go func() { res <- s.waitPrevious(ctx, ids[2], heldDelivery{ids[2]}) }()
	time.Sleep(frameQueuedWait + frameQueuedWait/2)
	select {
	case ok := <-res:
		t.Fatalf("frame 1 running: waitPrevious returned %v before frame 1 finished", ok)
	default:
	}
	setState(ids[1], jobs.Succeeded)
	if !<-res {
		t.Error("frame 1 finished: waitPrevious put frame 2 back, want it to run")
	}
}

package jobs

import (
	"context"
	"errors"
	"testing"
	"time"
)

// TestWatchers checks the Watch contract both backends rely on: a watcher
// gets its first record, then changes to its job or series; a slow watcher
// loses its oldest updates but always receives the latest; cancelling the
// context or closing the registry closes the channel.
func TestWatchers(t *testing.T) {
	var w Watchers
	ctx, cancel := context.WithCancel(context.Background())
	first := &Job{ID: "a", State: Queued}
	ch, err := w.Add(ctx, "a", first)
	if err != nil {
		t.Fatal(err)
	}
	series, err := w.Add(context.Background(), "s", nil)
	if err != nil {
		t.Fatal(err)
	}
	if got := <-ch; got != first {
		t.Fatalf("first record %+v", got)
	}
	// Overfill: 40 updates into a 16-slot channel, none read meanwhile.
	for i := 0; i < 40; i++ {
		w.Publish(&Job{ID: "a", Series: "s", Attempts: i})
	}
	w.Publish(&Job{ID: "other", Attempts: 99})
	var last *Job
	for n := 0; n < 16; n++ {
		last = <-ch
	}
	if last.Attempts != 39 {
		t.Errorf("latest update has Attempts %d, want 39", last.Attempts)
	}
	select {
	case j := <-ch:
		t.Errorf("unexpected extra update %+v (another job's?)", j)
	default:
	}
	if j := <-series; j.Series != "s" {
		t.Errorf("series watcher got %+v", j)
	}
	cancel()
	// The channel closes once the watcher sees the cancellation, at once;
	// the bound only turns a hang into a failure, long before the
	// package's time limit.
	deadline := time.After(time.Minute)
	for open := true; open; {
		select {
		case _, open = <-ch:
		case <-deadline:
			t.Fatal("cancelled watcher's channel not closed")
		}
	}
	w.Close()
	for range series {
	}
	if _, err := w.Add(context.Background(), "a", nil); !errors.Is(err, ErrClosed) {
		t.Errorf("Add after Close: %v, want ErrClosed", err)
	}
}

// TestAddCurrent: a change published while the watcher's first record is
// read reaches the watcher after it. The read here starts a publish and
// waits for it (50 ms at most): with the read inside AddCurrent's lock
// the publish waits for the watcher to be added and then reaches it; a
// read before the watcher is added (as a Store.Watch that reads and then
// calls Add) would let it finish first, to nobody, and the watcher would
// never see the change (a cancel asked meanwhile, lost).
func TestAddCurrent(t *testing.T) {
	var w Watchers
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	ch, err := w.AddCurrent(ctx, "a", func() (*Job, error) {
		done := make(chan struct{})
		go func() {
			w.Publish(&Job{ID: "a", State: Succeeded})
			close(done)
		}()
		select {
		case <-done:
		case <-time.After(50 * time.Millisecond):
		}
		return &Job{ID: "a", State: Running}, nil
	})
	if err != nil {
		t.Fatal(err)
	}
	var got []State
	for len(got) < 2 {
		select {
		case j := <-ch:
			got = append(got, j.State)
		case <-time.After(5 * time.Second):
			t.Fatalf("watcher got %v, want [running succeeded]", got)
		}
	}
	if got[0] != Running || got[1] != Succeeded {
		t.Errorf("watcher got %v, want [running succeeded]", got)
	}
	if _, err := w.AddCurrent(ctx, "b", func() (*Job, error) { return nil, ErrNotFound }); !errors.Is(err, ErrNotFound) {
		t.Errorf("AddCurrent with a failing read: %v, want its error", err)
	}
}

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

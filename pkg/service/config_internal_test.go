package service

import (
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/runner"
)

// TestConfigDefaultsAreTheRunners: a service configured with zeros takes
// the runner's defaults for the fields both have, keeps JobThreads at 0
// (the idle-core rule) and keeps values that are set.
func TestConfigDefaultsAreTheRunners(t *testing.T) {
	want := runner.Config{}.WithDefaults()
	var c Config
	c.MaxMemory = -1 // no budget: nothing read from the machine
	c.defaults()
	if c.Workers != want.Workers || c.MaxAttempts != want.MaxAttempts || c.MaxPixels != want.MaxPixels ||
		c.JobTimeout != want.JobTimeout || c.ShutdownGrace != want.ShutdownGrace || c.JobThreads != 0 || want.JobThreads != 0 {
		t.Errorf("service defaults %d workers, %d attempts, %d px, %v, %v, %d threads; runner's %d, %d, %d, %v, %v, %d",
			c.Workers, c.MaxAttempts, c.MaxPixels, c.JobTimeout, c.ShutdownGrace, c.JobThreads,
			want.Workers, want.MaxAttempts, want.MaxPixels, want.JobTimeout, want.ShutdownGrace, want.JobThreads)
	}
	set := Config{Workers: 3, MaxAttempts: 5, MaxPixels: 1000, JobTimeout: time.Minute, ShutdownGrace: time.Second, JobThreads: 2, MaxMemory: -1}
	set.defaults()
	if set.Workers != 3 || set.MaxAttempts != 5 || set.MaxPixels != 1000 || set.JobTimeout != time.Minute || set.ShutdownGrace != time.Second || set.JobThreads != 2 {
		t.Errorf("set values changed: %+v", set)
	}
}

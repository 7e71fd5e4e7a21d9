//go:build goexperiment.simd && amd64 && unix

package main

import (
	"os"
	"strings"
	"testing"
)

// In the GOEXPERIMENT=simd build the command links internal/preemptoff: its
// test binary, like the command, runs with asyncpreemptoff in GODEBUG even
// when started without it (the package re-executed it, and removed its
// marker).
func TestSimdBuildSetsAsyncPreemptOff(t *testing.T) {
	godebug := os.Getenv("GODEBUG")
	var set bool
	for _, kv := range strings.Split(godebug, ",") {
		if k, _, _ := strings.Cut(strings.TrimSpace(kv), "="); k == "asyncpreemptoff" {
			set = true
		}
	}
	if !set {
		t.Errorf("GODEBUG %q: the simd build runs without asyncpreemptoff", godebug)
	}
	if v, ok := os.LookupEnv("MOTTLE_ASYNCPREEMPTOFF_REEXEC"); ok {
		t.Errorf("the re-execution's marker is left in the environment (%q)", v)
	}
}

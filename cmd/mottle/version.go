package main

import (
	"context"
	"fmt"
	"runtime"
	"runtime/debug"
)

// version is the release of Mottle; set with -ldflags "-X main.version=…".
var version = "0.1.0-dev"

func runVersion(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "version", "", "Print Mottle's version, the Go version and the VCS revision it was built from.")
	if err := noArgs(e, fs, "version", args); err != nil {
		return err
	}
	rev := "unknown"
	if bi, ok := debug.ReadBuildInfo(); ok {
		for _, s := range bi.Settings {
			if s.Key == "vcs.revision" {
				rev = s.Value
			}
		}
	}
	fmt.Fprintf(e.stdout, "mottle %s (%s, %s/%s, revision %s)\n", version, runtime.Version(), runtime.GOOS, runtime.GOARCH, rev)
	return nil
}

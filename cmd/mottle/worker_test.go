package main

import (
	"context"
	"strings"
	"testing"
)

// TestWorkerFlags: a negative thread count (0, the default, is one thread
// and the idle cores for an analysis that starts alone, as in mottle
// serve) or no worker is a usage error that names the flag, found before
// the backend is dialled.
func TestWorkerFlags(t *testing.T) {
	for _, c := range []struct {
		name string
		args []string
		code int
		want string
	}{
		{"negative threads", []string{"--threads", "-1"}, 2, "--threads -1"},
		{"no workers", []string{"--workers", "0"}, 2, "--workers 0"},
	} {
		t.Run(c.name, func(t *testing.T) {
			e, _, errb := testEnv()
			args := append([]string{"worker", "--backend", "nats://127.0.0.1:1"}, c.args...)
			if code := run(context.Background(), e, args); code != c.code || !strings.Contains(errb.String(), c.want) {
				t.Errorf("exit %d, stderr %q; want exit %d naming %q", code, errb.String(), c.code, c.want)
			}
		})
	}
}

//go:build goexperiment.simd && amd64 && unix

package preemptoff

import (
	"bytes"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"slices"
	"strings"
	"testing"
)

// helperVar makes the test binary print what the re-execution left it
// (GODEBUG, the marker, its process id) and exit, instead of testing.
const helperVar = "PREEMPTOFF_TEST_HELPER"

func TestMain(m *testing.M) {
	if os.Getenv(helperVar) == "1" {
		fmt.Printf("GODEBUG=%s\nmarker=%s\npid=%d\n", os.Getenv("GODEBUG"), os.Getenv(Marker), os.Getpid())
		os.Exit(0)
	}
	os.Exit(m.Run())
}

func TestReexecEnv(t *testing.T) {
	for _, tc := range []struct {
		name    string
		environ []string
		godebug string // GODEBUG of the re-execution; "" for none
		err     error
	}{
		{"no GODEBUG", []string{"HOME=/h"}, "asyncpreemptoff=1", nil},
		{"empty GODEBUG", []string{"GODEBUG=", "HOME=/h"}, "asyncpreemptoff=1", nil},
		{"other settings kept", []string{"GODEBUG=madvdontneed=1,gctrace=1"}, "madvdontneed=1,gctrace=1,asyncpreemptoff=1", nil},
		{"a similar name is not the setting", []string{"GODEBUG=asyncpreemptoffx=1"}, "asyncpreemptoffx=1,asyncpreemptoff=1", nil},
		{"set to 1", []string{"GODEBUG=asyncpreemptoff=1"}, "", nil},
		{"set to 0: the user's choice", []string{"GODEBUG=gctrace=1, asyncpreemptoff=0"}, "", nil},
		{"the first GODEBUG counts, as for the runtime", []string{"GODEBUG=gctrace=1", "GODEBUG=asyncpreemptoff=1"}, "gctrace=1,asyncpreemptoff=1", nil},
		{"set after the re-execution", []string{"GODEBUG=asyncpreemptoff=1", Marker + "=1"}, "", nil},
		{"missing after the re-execution", []string{"GODEBUG=gctrace=1", Marker + "=1"}, "", errLoop},
	} {
		t.Run(tc.name, func(t *testing.T) {
			env, err := reexecEnv(tc.environ)
			if !errors.Is(err, tc.err) {
				t.Fatalf("error %v, want %v", err, tc.err)
			}
			if tc.godebug == "" {
				if env != nil {
					t.Fatalf("re-executes with %q, want no re-execution", env)
				}
				return
			}
			var godebug []string
			for _, kv := range env {
				if v, ok := strings.CutPrefix(kv, "GODEBUG="); ok {
					godebug = append(godebug, v)
				}
			}
			if !slices.Equal(godebug, []string{tc.godebug}) {
				t.Errorf("re-executes with GODEBUG %q, want one, %q", godebug, tc.godebug)
			}
			if !slices.Contains(env, Marker+"=1") {
				t.Errorf("re-executes without the marker: %q", env)
			}
			for _, kv := range tc.environ {
				if !strings.HasPrefix(kv, "GODEBUG=") && !slices.Contains(env, kv) {
					t.Errorf("re-executes without %q", kv)
				}
			}
		})
	}
}

// The test binary imports the package, so it re-executes itself as a
// command would: started without the setting, it runs (in the same
// process) with asyncpreemptoff=1 added and the marker removed; a GODEBUG
// that sets it is left alone; a process marked as re-executed but lacking
// the setting stops with a clear error instead of looping.
func TestReexecution(t *testing.T) {
	var base []string
	for _, kv := range os.Environ() {
		if k, _, _ := strings.Cut(kv, "="); k != "GODEBUG" && k != Marker {
			base = append(base, kv)
		}
	}
	for _, tc := range []struct {
		name    string
		env     []string
		godebug string // what the process runs with
		fails   bool
	}{
		{"no GODEBUG", nil, "asyncpreemptoff=1", false},
		{"other settings", []string{"GODEBUG=madvdontneed=1"}, "madvdontneed=1,asyncpreemptoff=1", false},
		{"set by the user", []string{"GODEBUG=asyncpreemptoff=0"}, "asyncpreemptoff=0", false},
		{"marker without the setting", []string{Marker + "=1"}, "", true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			cmd := exec.Command(os.Args[0], "-test.run=^$")
			cmd.Env = append(slices.Clone(base), append(tc.env, helperVar+"=1")...)
			var stdout, stderr bytes.Buffer
			cmd.Stdout, cmd.Stderr = &stdout, &stderr
			err := cmd.Run()
			if tc.fails {
				var ee *exec.ExitError
				if !errors.As(err, &ee) || ee.ExitCode() != 1 {
					t.Fatalf("exit %v, want status 1 (stdout %q)", err, stdout.String())
				}
				if msg := stderr.String(); !strings.Contains(msg, "must run with GODEBUG=asyncpreemptoff=1") || !strings.Contains(msg, errLoop.Error()) {
					t.Errorf("stderr %q does not say what is wrong and what to set", msg)
				}
				return
			}
			if err != nil {
				t.Fatalf("%v (stderr %q)", err, stderr.String())
			}
			want := fmt.Sprintf("GODEBUG=%s\nmarker=\npid=%d\n", tc.godebug, cmd.Process.Pid)
			if got := stdout.String(); got != want {
				t.Errorf("the process ran with\n%s\nwant\n%s", got, want)
			}
		})
	}
}

//go:build goexperiment.simd && amd64 && unix

package preemptoff

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"syscall"
)

// Marker is the environment variable the re-execution sets, and the
// re-executed process removes, to tell the two apart.
const Marker = "MOTTLE_ASYNCPREEMPTOFF_REEXEC"

func init() {
	env, err := reexecEnv(os.Environ())
	switch {
	case err != nil:
		fail(err)
	case env == nil:
		// The setting is in force: forget the marker, so that processes
		// this one starts make their own decision.
		os.Unsetenv(Marker)
		return
	}
	exe, err := os.Executable()
	if err == nil {
		err = syscall.Exec(exe, os.Args, env) // returns only on failure
		err = fmt.Errorf("re-executing %s: %w", exe, err)
	} else {
		err = fmt.Errorf("finding this executable to re-execute it: %w", err)
	}
	fail(err)
}

// fail stops the process with err and what to do.
func fail(err error) {
	fmt.Fprintf(os.Stderr, "%s: this build (GOEXPERIMENT=simd) must run with GODEBUG=asyncpreemptoff=1 and could not set it itself: %v\n"+
		"Run it with GODEBUG=asyncpreemptoff=1 in the environment (or asyncpreemptoff=0 to run without, much slower).\n",
		filepath.Base(os.Args[0]), err)
	os.Exit(1)
}

// errLoop is reexecEnv's error for a process that the re-execution
// started and whose GODEBUG still lacks the setting.
var errLoop = errors.New("GODEBUG lacks asyncpreemptoff after the re-execution that added it")

// reexecEnv returns the environment to re-execute the process with
// (environ with asyncpreemptoff=1 appended to GODEBUG and the marker set),
// or nil if GODEBUG in environ sets asyncpreemptoff already. It returns
// errLoop if the marker is set but the setting is missing.
func reexecEnv(environ []string) ([]string, error) {
	var godebug string
	var seen, marked bool
	for _, kv := range environ {
		k, v, _ := strings.Cut(kv, "=")
		switch k {
		case "GODEBUG":
			if !seen { // the runtime reads the first
				godebug, seen = v, true
			}
		case Marker:
			marked = true
		}
	}
	if hasSetting(godebug) {
		return nil, nil
	}
	if marked {
		return nil, errLoop
	}
	v := "asyncpreemptoff=1"
	if godebug != "" {
		v = godebug + "," + v
	}
	env := make([]string, 0, len(environ)+2)
	for _, kv := range environ {
		if k, _, _ := strings.Cut(kv, "="); k != "GODEBUG" {
			env = append(env, kv)
		}
	}
	return append(env, "GODEBUG="+v, Marker+"=1"), nil
}

// hasSetting reports whether the GODEBUG value v sets asyncpreemptoff,
// to any value.
func hasSetting(v string) bool {
	for _, kv := range strings.Split(v, ",") {
		if k, _, _ := strings.Cut(strings.TrimSpace(kv), "="); k == "asyncpreemptoff" {
			return true
		}
	}
	return false
}

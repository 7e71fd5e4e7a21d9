package main

import (
	"os/exec"
	"strings"
	"testing"
)

// TestLayering checks the project's architecture rule: nothing below the
// service imports net/http (directly or through a dependency), and the
// numerical packages stay free of the layers above them (DEVELOPERS.md:
// images → correlation → kinematics → results and maps → CLI and service).
func TestLayering(t *testing.T) {
	const mod = "github.com/mottledic/mottle/"
	forbidden := map[string][]string{
		"pkg/imageio":    {"pkg/"},
		"pkg/quality":    {"pkg/correlate", "pkg/kinematics", "pkg/field", "pkg/maps", "pkg/results", "pkg/analysis", "pkg/series", "pkg/service", "pkg/synth"},
		"pkg/calib":      {"pkg/spline", "pkg/correlate", "pkg/kinematics", "pkg/field", "pkg/maps", "pkg/results", "pkg/analysis", "pkg/series", "pkg/service", "pkg/synth"},
		"pkg/spline":     {"pkg/correlate", "pkg/kinematics", "pkg/field", "pkg/maps", "pkg/results", "pkg/analysis", "pkg/series", "pkg/service"},
		"pkg/correlate":  {"pkg/kinematics", "pkg/field", "pkg/maps", "pkg/results", "pkg/analysis", "pkg/series", "pkg/service", "pkg/synth"},
		"pkg/kinematics": {"pkg/correlate", "pkg/field", "pkg/maps", "pkg/results", "pkg/analysis", "pkg/series", "pkg/service"},
		"pkg/field":      {"pkg/correlate", "pkg/maps", "pkg/results", "pkg/analysis", "pkg/series", "pkg/service"},
		"pkg/maps":       {"pkg/correlate", "pkg/kinematics", "pkg/field", "pkg/results", "pkg/analysis", "pkg/series", "pkg/service"},
		// The one results pipeline sits on correlation, kinematics, the
		// field and its maps, below the analysis that calls it.
		"pkg/results":  {"pkg/analysis", "pkg/series", "pkg/service", "pkg/runner", "pkg/demo"},
		"pkg/analysis": {"pkg/series", "pkg/service", "pkg/runner", "pkg/demo"},
		"pkg/series":   {"pkg/service", "pkg/runner"},
		// Stereo matching, triangulation and surface strain sit beside
		// kinematics; the stereo series on them and on pkg/series.
		"pkg/stereo":   {"pkg/field", "pkg/maps", "pkg/results", "pkg/analysis", "pkg/series", "pkg/service", "pkg/runner"},
		"pkg/series3d": {"pkg/service", "pkg/runner"},
	}
	for pkg, bad := range forbidden {
		deps, err := exec.Command("go", "list", "-deps", "-f", `{{.ImportPath}}`, "../../"+pkg).Output()
		if err != nil {
			t.Fatalf("go list %s: %v", pkg, err)
		}
		for _, d := range strings.Fields(string(deps)) {
			if d == "net/http" {
				t.Errorf("%s depends on net/http; only pkg/service may", pkg)
			}
			rel, ok := strings.CutPrefix(d, mod)
			if !ok || rel == pkg {
				continue
			}
			for _, b := range bad {
				if strings.HasPrefix(rel, b) {
					t.Errorf("%s depends on %s, a layer above it", pkg, rel)
				}
			}
		}
	}
	for _, p := range []string{"pkg/synth", "pkg/roi", "pkg/demo", "pkg/verify"} {
		deps, err := exec.Command("go", "list", "-deps", "-f", `{{.ImportPath}}`, "../../"+p).Output()
		if err != nil {
			t.Fatalf("go list %s: %v", p, err)
		}
		for _, d := range strings.Fields(string(deps)) {
			if d == "net/http" {
				t.Errorf("%s depends on net/http; only pkg/service may", p)
			}
		}
	}
	checkServiceSplit(t, mod)
}

// checkServiceSplit checks the split of the service by job (issue 13):
// pkg/service holds the HTTP handlers and is the only package besides the
// commands that imports net/http; the job runner (pkg/runner) and the job
// backends (pkg/service/jobs, embedded, natsjs) import no handler code;
// the backends do not import the runner, and the runner reaches the
// backends only through the interfaces of pkg/service/jobs.
func checkServiceSplit(t *testing.T, mod string) {
	out, err := exec.Command("go", "list", "-f", `{{.ImportPath}}|{{join .Imports " "}}|{{join .Deps " "}}`, "../../...").Output()
	if err != nil {
		t.Fatalf("go list ../../...: %v", err)
	}
	const http = "net/http"
	// natsjs reaches net/http only through the NATS client library (its
	// WebSocket transport); it must not import net/http itself.
	viaLibrary := map[string]bool{"pkg/service/natsjs": true}
	handlers := func(rel string) bool { return rel == "pkg/service" }
	forbidden := map[string]func(rel string) bool{
		"pkg/runner": func(rel string) bool {
			return handlers(rel) || rel == "pkg/service/embedded" || rel == "pkg/service/natsjs" || rel == "pkg/service/access"
		},
		"pkg/service/jobs":     func(rel string) bool { return handlers(rel) || strings.HasPrefix(rel, "pkg/runner") },
		"pkg/service/embedded": func(rel string) bool { return handlers(rel) || strings.HasPrefix(rel, "pkg/runner") },
		"pkg/service/natsjs":   func(rel string) bool { return handlers(rel) || strings.HasPrefix(rel, "pkg/runner") },
	}
	seen := map[string]bool{}
	for _, line := range strings.Split(strings.TrimSpace(string(out)), "\n") {
		parts := strings.Split(line, "|")
		if len(parts) != 3 {
			t.Fatalf("go list: unexpected line %q", line)
		}
		rel, ok := strings.CutPrefix(parts[0], mod)
		if !ok {
			continue
		}
		seen[rel] = true
		httpOK := handlers(rel) || strings.HasPrefix(rel, "cmd/")
		for _, d := range strings.Fields(parts[1]) {
			if d == http && !httpOK {
				t.Errorf("%s imports net/http; only the HTTP package pkg/service (and the commands) may", rel)
			}
		}
		bad := forbidden[rel]
		for _, d := range strings.Fields(parts[2]) {
			if d == http && !httpOK && !viaLibrary[rel] {
				t.Errorf("%s depends on net/http; only the HTTP package pkg/service (and the commands) may", rel)
			}
			if dr, ok := strings.CutPrefix(d, mod); ok && bad != nil && bad(dr) {
				t.Errorf("%s depends on %s: the runner and the backends import no handler code, and the backends not the runner", rel, dr)
			}
		}
	}
	for p := range forbidden {
		if !seen[p] {
			t.Errorf("package %s not found by go list; update the layering test", p)
		}
	}
}

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
		"pkg/results":  {"pkg/analysis", "pkg/series", "pkg/service", "pkg/demo"},
		"pkg/analysis": {"pkg/series", "pkg/service", "pkg/demo"},
		"pkg/series":   {"pkg/service"},
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
}

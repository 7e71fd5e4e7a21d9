package stereo

import (
	"bytes"
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"testing"

	"github.com/mottledic/mottle/internal/stereobench"
	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/synth"
)

// python is Debian's interpreter, which sees python3-opencv (another
// python3 may come first on PATH).
const python = "/usr/bin/python3"

// bench returns the cameras of the invented bench (synth.BenchRig) and the
// exact rig they form.
func bench(w, h int) (l, r synth.Cam, rig *calib.Rig) {
	return stereobench.Rig(w, h)
}

// toLeft returns the world point P in the left camera's frame.
func toLeft(l synth.Cam, P [3]float64) [3]float64 {
	var q [3]float64
	for i := range 3 {
		q[i] = l.Pose.R[i][0]*P[0] + l.Pose.R[i][1]*P[1] + l.Pose.R[i][2]*P[2] + l.Pose.T[i]
	}
	return q
}

// runRef runs scripts/ref_stereo.py on req and decodes its answer.
func runRef(t *testing.T, req, out any) {
	t.Helper()
	d, _ := filepath.Abs(".")
	var script string
	for {
		s := filepath.Join(d, "scripts", "ref_stereo.py")
		if _, err := os.Stat(s); err == nil {
			script = s
			break
		}
		if filepath.Dir(d) == d {
			t.Fatal("scripts/ref_stereo.py not found above the working directory")
		}
		d = filepath.Dir(d)
	}
	body, _ := json.Marshal(req)
	f := filepath.Join(t.TempDir(), "req.json")
	if err := os.WriteFile(f, body, 0o644); err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(python, script, f)
	var o, e bytes.Buffer
	cmd.Stdout, cmd.Stderr = &o, &e
	if err := cmd.Run(); err != nil {
		t.Fatalf("%s ref_stereo.py: %v: %s (install the Debian package python3-opencv)", python, err, e.String())
	}
	if err := json.Unmarshal(o.Bytes(), out); err != nil {
		t.Fatal(err)
	}
}

package series

import (
	"context"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/imageio"
)

// TestRun checks the frame loop moved out of the CLI: with an exact
// (fake) correlator, Run writes a folder per frame, state.json after each
// frame and the curve and report at the end, and its curve is the one of
// adding the frames to a tracker by hand; a run stopped after a frame
// keeps that frame's state and still writes the report. The motions are
// closed-form (uniform stretch), so the expected curve is known without
// the project's correlation.
func TestRun(t *testing.T) {
	ms := []motion{{l1: 1.01, l2: 0.997, directZ: 0.99}, {l1: 1.02, l2: 0.994, directZ: 0.99}, {l1: 1.03, l2: 0.991, directZ: 0.99}}
	f, imgs := newFake(ms)
	p := testParams()
	paths := make([]string, len(imgs))
	byPath := map[string]*imageio.Gray{}
	for i, im := range imgs {
		paths[i] = fmt.Sprintf("f%d.png", i+1)
		byPath[paths[i]] = im
	}
	metas := []FrameMeta{{Name: "ref.png"}}
	for _, pth := range paths {
		metas = append(metas, FrameMeta{Name: pth})
	}
	read := func(path string) (*imageio.Gray, error) { return byPath[path], nil }

	want, err := newTracker(f.ref, metas[0], p, f)
	if err != nil {
		t.Fatal(err)
	}
	for i, im := range imgs {
		if _, err := want.Add(context.Background(), im, metas[i+1]); err != nil {
			t.Fatal(err)
		}
	}

	for _, stopAfter := range []int{0, 1} {
		t.Run(fmt.Sprintf("stopAfter=%d", stopAfter), func(t *testing.T) {
			tr, err := newTracker(f.ref, metas[0], p, f)
			if err != nil {
				t.Fatal(err)
			}
			ctx, cancel := context.WithCancel(context.Background())
			defer cancel()
			out := t.TempDir()
			cfg := RunConfig{Out: out, Frames: paths, Metas: metas, RefName: "ref.png", Read: read,
				Progress: func(i, n int, label string) {
					if stopAfter > 0 && i == stopAfter && label != "" {
						cancel() // frame stopAfter (0-based) starts: stop it
					}
				}}
			c, err := Run(ctx, tr, cfg)
			n := len(paths)
			if stopAfter > 0 {
				n = stopAfter
				if err == nil {
					t.Fatalf("run stopped after frame %d: no error", stopAfter)
				}
			} else if err != nil {
				t.Fatal(err)
			}
			if len(c.Rows) != n+1 {
				t.Fatalf("curve has %d rows, want %d", len(c.Rows), n+1)
			}
			wc := want.Curve()
			for i := range c.Rows {
				if !reflect.DeepEqual(c.Rows[i], wc.Rows[i]) {
					t.Errorf("row %d: %+v, want %+v", i, c.Rows[i], wc.Rows[i])
				}
			}
			for i := 1; i <= len(paths); i++ {
				_, err := os.Stat(filepath.Join(out, "frames", fmt.Sprintf("%04d", i), "field.npz"))
				if (i <= n) != (err == nil) {
					t.Errorf("frame %d folder: %v (frames done %d)", i, err, n)
				}
			}
			b, err := os.ReadFile(filepath.Join(out, StateFile))
			if err != nil {
				t.Fatal(err)
			}
			var st State
			if err := json.Unmarshal(b, &st); err != nil || len(st.Curve) != n+1 {
				t.Errorf("state.json: %d curve rows (%v), want %d", len(st.Curve), err, n+1)
			}
			for _, name := range []string{"curve.csv", "report.html"} {
				if _, err := os.Stat(filepath.Join(out, name)); err != nil {
					t.Errorf("%s: %v", name, err)
				}
			}
		})
	}

	tr, _ := newTracker(f.ref, metas[0], p, f)
	if _, err := Run(context.Background(), tr, RunConfig{Out: t.TempDir(), Frames: paths, Metas: metas[:2], Read: read}); err == nil || !strings.Contains(err.Error(), "metadata") {
		t.Errorf("run with too few metadata: %v, want an error naming the metadata", err)
	}
}

// TestResumeErrors checks that Resume refuses a state with more frames
// than are given and a missing state file, naming what is wrong.
func TestResumeErrors(t *testing.T) {
	out := t.TempDir()
	ref := imageio.NewGray(8, 8)
	if _, _, err := Resume(out, ref, nil, nil); err == nil || !strings.Contains(err.Error(), "state") {
		t.Errorf("missing state.json: %v", err)
	}
	st := State{Curve: make([]Summary, 3)}
	b, _ := json.Marshal(st)
	if err := os.WriteFile(filepath.Join(out, StateFile), b, 0o644); err != nil {
		t.Fatal(err)
	}
	if _, _, err := Resume(out, ref, []string{"a.png"}, nil); err == nil || !strings.Contains(err.Error(), "2 frames but only 1") {
		t.Errorf("state of 2 frames, 1 given: %v", err)
	}
}

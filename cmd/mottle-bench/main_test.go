package main

import (
	"bytes"
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"testing"

	"github.com/mottledic/mottle/pkg/synth"
	"github.com/mottledic/mottle/pkg/verify"
)

// The -worker mode answers a driver request in the driver format.
func TestWorker(t *testing.T) {
	dir := t.TempDir()
	c := verify.BenchCase{Name: "w", Motion: synth.Translation{U: 0.8, V: 0.3}, Size: 96, Subset: 21, Step: 16, Seed: 9}
	ref, def, err := c.Files(dir)
	if err != nil {
		t.Fatal(err)
	}
	pts, truth := c.Points()
	req := filepath.Join(dir, "req.json")
	b, _ := json.Marshal(verify.Request{Reference: ref, Deformed: def, Subset: 21, Points: pts})
	if err := os.WriteFile(req, b, 0o644); err != nil {
		t.Fatal(err)
	}
	var out bytes.Buffer
	if err := run(context.Background(), []string{"-worker", req, "-threads", "1"}, &out); err != nil {
		t.Fatal(err)
	}
	var resp verify.Response
	if err := json.Unmarshal(out.Bytes(), &resp); err != nil {
		t.Fatalf("worker output %q: %v", out.String(), err)
	}
	e, err := verify.Errors(resp.Disp(), truth)
	if err != nil || e.Failed != 0 || !(e.RMS < 0.03) || resp.Library != "mottle" {
		t.Errorf("worker: %+v %v (library %q)", e, err, resp.Library)
	}
	if err := run(context.Background(), []string{"-worker", filepath.Join(dir, "none.json")}, &out); err == nil {
		t.Error("missing request accepted")
	}
}

package main

import (
	"bytes"
	"context"
	"regexp"
	"testing"
)

// TestStereoSpeed runs the stereo section of the report on the quick
// scene: every row is there with a positive number of points.
func TestStereoSpeed(t *testing.T) {
	var b bytes.Buffer
	if err := stereoSpeed(context.Background(), &b, true); err != nil {
		t.Fatal(err)
	}
	for _, row := range []string{`2D correlation, left camera \(baseline\) \| [1-9]\d* \|`, `stereo match, left → right reference \| [1-9]\d* \|`, `tracking of a deformed pair .* \| [1-9]\d* \|`} {
		if !regexp.MustCompile(row).Match(b.Bytes()) {
			t.Errorf("row %q missing from\n%s", row, b.String())
		}
	}
}

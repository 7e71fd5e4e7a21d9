package service

import (
	"testing"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// TestJobBytes: the memory budget charges a frame of a 2D series for the
// previous frame it also holds, and a stereo job and a frame of a stereo
// series as a 2D analysis (their measured peak, four images included, is
// below a 2D analysis' on the same images: BenchmarkStereoMemory).
func TestJobBytes(t *testing.T) {
	const px = 100 * 100
	for _, c := range []struct {
		name   string
		j      jobs.Job
		stereo bool
		want   int64
	}{
		{"2D analysis", jobs.Job{Kind: jobs.Analysis}, false, px * jobBytesPerPixel},
		{"2D analysis with a mask", jobs.Job{Kind: jobs.Analysis, HasMask: true}, false, px * (jobBytesPerPixel + maskBytesPerPixel)},
		{"2D series frame", jobs.Job{Kind: jobs.Frame}, false, px * frameBytesPerPixel},
		{"stereo job", jobs.Job{Kind: jobs.Stereo}, false, px * jobBytesPerPixel},
		{"stereo series frame", jobs.Job{Kind: jobs.Frame}, true, px * jobBytesPerPixel},
	} {
		c.j.Width, c.j.Height = 100, 100
		if got := jobBytes(&c.j, c.stereo); got != c.want {
			t.Errorf("%s: %d bytes, want %d", c.name, got, c.want)
		}
	}
}

package runner

import (
	"fmt"
	"io"
	"log/slog"
	"runtime"
	"testing"

	"github.com/mottledic/mottle/pkg/service/embedded"
)

// TestAnalysisThreads: with JobThreads left at 0, an analysis job takes
// the cores the running jobs (itself included) leave idle, at least one;
// a JobThreads the caller sets is used as it is.
func TestAnalysisThreads(t *testing.T) {
	defer runtime.GOMAXPROCS(runtime.GOMAXPROCS(4))
	for _, c := range []struct{ jobThreads, running, want int }{
		{0, 1, 4}, {0, 2, 2}, {0, 3, 1}, {0, 4, 1}, {0, 9, 1}, {0, 0, 4},
		{1, 1, 1}, {3, 1, 3}, {3, 5, 3},
	} {
		be, err := embedded.Open(t.TempDir(), 4)
		if err != nil {
			t.Fatal(err)
		}
		s, err := New(Config{Backend: be, Analyzer: Pipeline{}, Workers: 4, JobThreads: c.jobThreads,
			Logger: slog.New(slog.NewJSONHandler(io.Discard, nil))})
		if err != nil {
			t.Fatal(err)
		}
		for i := range c.running {
			s.running[fmt.Sprint(i)] = func(error) {}
		}
		if got := s.analysisThreads(); got != c.want {
			t.Errorf("JobThreads %d, %d jobs running on 4 cores: %d threads, want %d", c.jobThreads, c.running, got, c.want)
		}
		be.Close()
	}
}

package quality_test

import (
	"context"
	"syscall"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
	"github.com/mottledic/mottle/pkg/synth"
)

func benchImage(b *testing.B) *imageio.Gray {
	ref, _, err := synth.Pair(synth.PatternOptions{Seed: 1}, nil, synth.RenderOptions{W: 1024, H: 1024, Noise: 1})
	if err != nil {
		b.Fatal(err)
	}
	return ref
}

// BenchmarkStats1024 is the baseline: imageio.Stats, one plain pass over
// the 1024² image. Report the others as ratios to it.
func BenchmarkStats1024(b *testing.B) {
	g := benchImage(b)
	for b.Loop() {
		imageio.Stats(g)
	}
}

// BenchmarkMeasure1024 measures every quality measure of a 1024² image.
func BenchmarkMeasure1024(b *testing.B) {
	g := benchImage(b)
	for b.Loop() {
		if _, err := quality.Measure(g, nil); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkChooseSubset1024 chooses the subset for 0.01 px on a 1024²
// image: 7–101 px on an 8 px grid (15,625 points × 48 sizes).
func BenchmarkChooseSubset1024(b *testing.B) {
	g := benchImage(b)
	for b.Loop() {
		if _, err := quality.ChooseSubset(context.Background(), g, quality.SubsetOptions{Target: 0.01, Noise: 1}); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkMeasure512 measures every quality measure of a 512² image, the
// size of the service's latency benchmark (pkg/service
// BenchmarkLatency512).
//
// It also reports the process CPU time (user + sys) per measure, the
// figure to compare on a shared machine.
func BenchmarkMeasure512(b *testing.B) {
	g := benchImage(b).Sub(256, 256, 512, 512)
	c0 := cpuTime()
	for b.Loop() {
		if _, err := quality.Measure(g, nil); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64((cpuTime()-c0).Microseconds())/1000/float64(b.N), "cpu-ms/op")
}

// cpuTime returns the user + system CPU time of the process so far.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

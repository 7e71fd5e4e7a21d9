// Package heapwatch measures the peak live heap of a piece of work, for
// the memory benchmarks of several packages (the budget of 150 bytes per
// image pixel and the service's memory charges rest on them).
package heapwatch

import (
	"runtime/metrics"
	"time"
)

// sample is the runtime metric of the heap's live and not yet swept
// objects, in bytes.
const sample = "/memory/classes/heap/objects:bytes"

// Now returns the heap's objects in bytes at this moment.
func Now() uint64 {
	s := []metrics.Sample{{Name: sample}}
	metrics.Read(s)
	return s[0].Value.Uint64()
}

// Peak samples the heap's objects every millisecond until stop is closed,
// and once more then, and sends the largest value seen, in bytes.
func Peak(stop <-chan struct{}) <-chan uint64 {
	out := make(chan uint64, 1)
	go func() {
		s := []metrics.Sample{{Name: sample}}
		var peak uint64
		t := time.NewTicker(time.Millisecond)
		defer t.Stop()
		for {
			metrics.Read(s)
			peak = max(peak, s[0].Value.Uint64())
			select {
			case <-stop:
				metrics.Read(s)
				out <- max(peak, s[0].Value.Uint64())
				return
			case <-t.C:
			}
		}
	}()
	return out
}

package heapwatch

import (
	"runtime"
	"testing"
)

// TestPeakSeesAllocation: a 64 MiB block held until Peak is stopped
// raises the peak by at least its size above the heap before it, and the
// peak is at least what Now reads while the block is held.
func TestPeakSeesAllocation(t *testing.T) {
	runtime.GC()
	base := Now()
	stop := make(chan struct{})
	pk := Peak(stop)
	const size = 64 << 20
	b := make([]byte, size)
	for i := range b {
		b[i] = byte(i)
	}
	held := Now()
	close(stop)
	peak := <-pk
	runtime.KeepAlive(b)
	if peak < base+size || peak < held {
		t.Errorf("peak %d bytes with a %d-byte block held above a heap of %d (%d while held): want at least %d", peak, size, base, held, max(base+size, held))
	}
}

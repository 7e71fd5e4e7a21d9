//go:build !linux

package correlate

import "time"

// runqueueWait is not measured on this system (see sched_linux_test.go).
func runqueueWait() time.Duration { return 0 }

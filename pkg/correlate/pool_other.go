//go:build !linux

package correlate

import "runtime"

// osYield yields to other goroutines: without sched_yield, the waiting
// between the goroutine yields and the sleep is the same as before it.
func osYield() { runtime.Gosched() }

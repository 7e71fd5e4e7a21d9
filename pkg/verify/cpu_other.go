//go:build !unix

package verify

import "time"

// processCPU returns 0: the CPU time of the process is read on Unix only.
func processCPU() time.Duration { return 0 }

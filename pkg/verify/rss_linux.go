//go:build linux

package verify

import (
	"os"
	"syscall"
)

// PeakRSS returns the peak resident memory in bytes of a finished process,
// or 0 if it is unknown. On Linux, getrusage reports ru_maxrss in KiB
// (getrusage(2)).
func PeakRSS(ps *os.ProcessState) int64 {
	if ps == nil {
		return 0
	}
	if ru, ok := ps.SysUsage().(*syscall.Rusage); ok {
		return int64(ru.Maxrss) * 1024
	}
	return 0
}

package service

import (
	"bytes"
	"os"
	"strconv"
	"syscall"
)

// systemMemory returns the memory of the machine, or the limit of the
// service's control group (cgroup v2 memory.max) when that is smaller; 0
// when neither can be read.
func systemMemory() int64 {
	var si syscall.Sysinfo_t
	n := int64(0)
	if syscall.Sysinfo(&si) == nil {
		n = int64(si.Totalram) * int64(si.Unit)
	}
	if b, err := os.ReadFile("/sys/fs/cgroup/memory.max"); err == nil {
		if v, err := strconv.ParseInt(string(bytes.TrimSpace(b)), 10, 64); err == nil && v > 0 && (n == 0 || v < n) {
			n = v
		}
	}
	return n
}

// residentBytes returns the resident set size of this process (from
// /proc/self/statm), or -1.
func residentBytes() int64 {
	b, err := os.ReadFile("/proc/self/statm")
	if err != nil {
		return -1
	}
	f := bytes.Fields(b)
	if len(f) < 2 {
		return -1
	}
	pages, err := strconv.ParseInt(string(f[1]), 10, 64)
	if err != nil {
		return -1
	}
	return pages * int64(os.Getpagesize())
}

//go:build !linux

package service

// systemMemory is not read on this system (the default budget is then 4 GiB).
func systemMemory() int64 { return 0 }

// residentBytes is not read on this system.
func residentBytes() int64 { return -1 }

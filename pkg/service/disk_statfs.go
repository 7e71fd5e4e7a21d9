//go:build linux || darwin

package service

import "syscall"

// freeBytes returns the bytes available to an unprivileged writer on the
// file system of dir (statfs f_bavail · f_bsize).
func freeBytes(dir string) (int64, error) {
	var st syscall.Statfs_t
	if err := syscall.Statfs(dir, &st); err != nil {
		return 0, err
	}
	return int64(uint64(st.Bavail) * uint64(st.Bsize)), nil
}

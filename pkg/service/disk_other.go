//go:build !linux && !darwin

package service

import "errors"

// freeBytes is not implemented on this system: the free-space threshold
// is not checked (writes that find the disk full are still answered 507).
func freeBytes(dir string) (int64, error) {
	return 0, errors.New("free space cannot be read on this system")
}

package jobs

import (
	"errors"
	"fmt"
	"syscall"
)

// NoSpaceError is a write that failed because the storage is full
// (ENOSPC, or EDQUOT for a quota). The service answers it 507 Insufficient
// Storage, and a job that meets it fails with that reason.
type NoSpaceError struct {
	// What names the write ("storing jobs/…/out/field.npz", "job record …").
	What string
	Err  error
}

// Error says which write found the storage full.
func (e *NoSpaceError) Error() string {
	return fmt.Sprintf("%s: the server's storage is full (%v)", e.What, e.Err)
}

// Unwrap returns the error of the write.
func (e *NoSpaceError) Unwrap() error { return e.Err }

// IsNoSpace reports whether err is, or wraps, a write refused for lack of
// space.
func IsNoSpace(err error) bool {
	var ns *NoSpaceError
	return err != nil && (errors.As(err, &ns) || errors.Is(err, syscall.ENOSPC) || isQuota(err))
}

// NoSpace wraps err as a *NoSpaceError naming what when it is a lack of
// space, and returns it unchanged otherwise.
func NoSpace(what string, err error) error {
	var ns *NoSpaceError
	if !IsNoSpace(err) || errors.As(err, &ns) {
		return err
	}
	return &NoSpaceError{What: what, Err: err}
}

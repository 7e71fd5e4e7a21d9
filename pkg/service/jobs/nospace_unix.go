//go:build unix

package jobs

import (
	"errors"
	"syscall"
)

func isQuota(err error) bool { return errors.Is(err, syscall.EDQUOT) }

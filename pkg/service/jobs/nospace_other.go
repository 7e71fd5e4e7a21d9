//go:build !unix

package jobs

func isQuota(err error) bool { return false }

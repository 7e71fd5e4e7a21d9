//go:build !amd64

package correlate

// prefetchRows does nothing on this architecture (see prefetch_amd64.go).
func prefetchRows(a uintptr, rows, stride, lines int) {}

package correlate

// prefetchRows asks the processor to load rows rows of lines 64-byte
// cache lines each into its caches (PREFETCHT0, prefetch_amd64.s): the
// first row from address a on, each further row stride bytes after the one
// before. It only hints: it neither faults, even at an address that is not
// mapped, nor changes memory, and it returns without waiting for the lines.
func prefetchRows(a uintptr, rows, stride, lines int)

//go:build goexperiment.simd && amd64 && unix

package main

// In the GOEXPERIMENT=simd build the command re-executes itself once, before
// main, with GODEBUG=asyncpreemptoff=1 added when GODEBUG does not set
// asyncpreemptoff (see internal/preemptoff for why Go 1.26 needs it).
import _ "github.com/mottledic/mottle/internal/preemptoff"

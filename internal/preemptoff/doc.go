// Package preemptoff makes a GOEXPERIMENT=simd build of a Mottle command
// run with GODEBUG=asyncpreemptoff=1 without the user setting it.
//
// With Go 1.26 and GOEXPERIMENT=simd on amd64, the runtime's asynchronous
// preemption (runtime/preempt_amd64.s) saves and restores the vector
// registers in full (Y0–Y15, or Z0–Z31 and K0–K7 on AVX-512 CPUs) and
// never clears their upper halves afterwards (VZEROUPPER). After every such
// preemption the legacy SSE instructions of Go's scalar floating-point code
// and of assembly such as math.Exp run many times slower, until something
// clears the upper halves. The setting asyncpreemptoff=1 turns
// asynchronous preemption off (goroutines are then preempted at function
// calls only), and a program cannot set it itself: `//go:debug
// asyncpreemptoff=1` is refused, and the runtime reads GODEBUG once, at
// start.
//
// So, in that build only (the files of this package that do anything are
// built with goexperiment.simd on amd64 Unix systems), importing this
// package makes the process, before main runs, replace itself once
// (execve, same process id, arguments and environment) by the same
// executable with asyncpreemptoff=1 added to GODEBUG, when GODEBUG does
// not set asyncpreemptoff already. A GODEBUG that sets it, to any value, is
// left as the user gave it (asyncpreemptoff=0 runs without re-executing).
// A marker variable guards against a loop: a process started by the
// re-execution whose GODEBUG still lacks the setting stops with an error
// instead of re-executing again, as it does when the re-execution itself
// fails; the message says to set GODEBUG=asyncpreemptoff=1.
//
// The commands import it from a build-tagged file (cmd/mottle/preempt_simd.go,
// cmd/mottle-bench/preempt_simd.go); in the default build it is not linked.
package preemptoff

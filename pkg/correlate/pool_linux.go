package correlate

import "syscall"

// osYield gives the thread's core to another runnable thread or process,
// if there is one (sched_yield), and returns at once otherwise.
func osYield() { syscall.Syscall(syscall.SYS_SCHED_YIELD, 0, 0, 0) }

package correlate

import (
	"fmt"
	"os"
	"time"
)

// runqueueWait returns the time the threads of this process have spent
// runnable but waiting for a CPU (the second field of
// /proc/self/task/*/schedstat, summed), or 0 where it is not available.
// Across a benchmark run it tells whether the run had its cores: on a
// shared machine the other processes' threads take turns with ours, and
// wall-clock points/s then measure the machine's load, not the program.
func runqueueWait() time.Duration {
	ents, err := os.ReadDir("/proc/self/task")
	if err != nil {
		return 0
	}
	var sum time.Duration
	for _, e := range ents {
		b, err := os.ReadFile("/proc/self/task/" + e.Name() + "/schedstat")
		if err != nil {
			continue // the thread has exited
		}
		var run, wait int64
		if _, err := fmt.Sscan(string(b), &run, &wait); err == nil {
			sum += time.Duration(wait)
		}
	}
	return sum
}

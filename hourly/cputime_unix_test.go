//go:build unix

package hourly

import (
	"syscall"
	"time"
)

// processCPU returns the user+system CPU time the test process has used.
// Benchmarks report it per op beside the wall-clock ns/op, which on a shared
// machine grows with the load of other processes.
func processCPU() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

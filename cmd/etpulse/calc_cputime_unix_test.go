//go:build unix

package main

import (
	"syscall"
	"time"
)

// processCPU returns the user+system CPU time the test process has used, so
// that BenchmarkCalc can report a rate that does not shrink when other
// processes load the machine.
func processCPU() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

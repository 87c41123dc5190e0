//go:build unix

package loadgen

import (
	"syscall"
	"time"
)

// ProcessCPU returns the user+system CPU time the process has used, so a run
// can report CPU per message, a figure that holds up better than msg/s when
// other processes load the machine.
func ProcessCPU() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

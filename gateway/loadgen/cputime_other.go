//go:build !unix

package loadgen

import "time"

// ProcessCPU is not measured on this platform: it returns 0.
func ProcessCPU() time.Duration { return 0 }

package loadgen

import (
	"bufio"
	"os"
	"strconv"
	"strings"
)

// ioCounters are the process's write counters from /proc/self/io.
type ioCounters struct {
	writeBytes uint64 // caused to be sent to the storage layer (write_bytes)
	wchar      uint64 // handed to write calls, page cache or not (wchar)
	ok         bool
}

// readIO returns the process's write counters; ok is false where
// /proc/self/io is unavailable.
func readIO() ioCounters {
	f, err := os.Open("/proc/self/io")
	if err != nil {
		return ioCounters{}
	}
	defer f.Close()
	var c ioCounters
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		key, val, found := strings.Cut(sc.Text(), ":")
		if !found {
			continue
		}
		n, err := strconv.ParseUint(strings.TrimSpace(val), 10, 64)
		if err != nil {
			continue
		}
		switch key {
		case "write_bytes":
			c.writeBytes, c.ok = n, true
		case "wchar":
			c.wchar = n
		}
	}
	return c
}

// resetPeakRSS sets the process's peak resident set size (VmHWM) back to
// its current size, so the gateway phase's peak is not the bare phase's.
// It reports false where the kernel does not allow it: the peak then covers
// the whole process life.
func resetPeakRSS() bool {
	return os.WriteFile("/proc/self/clear_refs", []byte("5"), 0) == nil
}

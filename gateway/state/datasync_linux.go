package state

import (
	"os"
	"syscall"
)

// datasync flushes f's data and the metadata needed to read it back
// (fdatasync), as bbolt does for the state file.
func datasync(f *os.File) error { return syscall.Fdatasync(int(f.Fd())) }

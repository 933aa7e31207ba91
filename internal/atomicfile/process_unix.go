//go:build unix

package atomicfile

import (
	"errors"
	"syscall"
)

// processRuns reports whether a process with this PID exists. Signal 0
// checks without sending anything; EPERM means it exists but belongs to
// another user.
func processRuns(pid int) bool {
	err := syscall.Kill(pid, 0)
	return err == nil || errors.Is(err, syscall.EPERM)
}

//go:build unix

package pack

import (
	"os"
	"syscall"
)

// openNoWait opens path for reading without waiting for a writer when it
// is a FIFO; callers check what they opened (regular files read as usual).
func openNoWait(path string) (*os.File, error) {
	return os.OpenFile(path, os.O_RDONLY|syscall.O_NONBLOCK, 0)
}

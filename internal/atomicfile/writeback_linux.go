package atomicfile

import (
	"os"

	"golang.org/x/sys/unix"
)

// startWriteback asks the kernel to start writing n bytes at off of f to
// the disk without waiting for them, so that the fsync of Commit finds
// little left to write. It is a hint: errors surface at the fsync.
func startWriteback(f *os.File, off, n int64) {
	if c, err := f.SyscallConn(); err == nil {
		c.Control(func(fd uintptr) {
			unix.SyncFileRange(int(fd), off, n, unix.SYNC_FILE_RANGE_WRITE)
		})
	}
}

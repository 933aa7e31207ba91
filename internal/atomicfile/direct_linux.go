package atomicfile

import (
	"os"

	"golang.org/x/sys/unix"
)

// setDirect turns O_DIRECT on or off for f and reports whether f is now
// in the state asked for.
func setDirect(f *os.File, on bool) bool {
	c, err := f.SyscallConn()
	if err != nil {
		return false
	}
	ok := false
	c.Control(func(fd uintptr) {
		flags, err := unix.FcntlInt(fd, unix.F_GETFL, 0)
		if err != nil {
			return
		}
		want := flags &^ unix.O_DIRECT
		if on {
			want |= unix.O_DIRECT
		}
		if want == flags {
			ok = true
			return
		}
		_, err = unix.FcntlInt(fd, unix.F_SETFL, want)
		ok = err == nil
	})
	return ok
}

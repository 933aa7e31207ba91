//go:build unix

package inputfile

import "syscall"

const nonblock = syscall.O_NONBLOCK

//go:build !linux

package atomicfile

import "os"

// setDirect reports that direct mode is not offered here, and that a
// file is out of it.
func setDirect(_ *os.File, on bool) bool { return !on }

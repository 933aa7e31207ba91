//go:build !unix

package pack

import "os"

// openNoWait opens path for reading; callers check what they opened.
func openNoWait(path string) (*os.File, error) { return os.Open(path) }

package atomicfile

import (
	"errors"
	"fmt"
	"io/fs"
	"os"

	"ternkit/internal/inputfile"
)

// ErrNotRegular reports a destination that exists and is not a regular
// file: a directory, a named pipe, a device or a socket, which a rename
// would replace (or fail on) instead of writing into.
var ErrNotRegular = errors.New("exists and is not a regular file")

// ErrSameFile reports a destination that is one of the command's inputs:
// writing it would destroy what is being read.
var ErrSameFile = errors.New("is the same file as an input")

// checkDestination refuses a destination that exists and is not a regular
// file (symbolic links followed) and returns the mode of a regular file it
// would replace, nil when there is none.
func checkDestination(path string) (*fs.FileMode, error) {
	fi, err := os.Stat(path)
	switch {
	case errors.Is(err, fs.ErrNotExist):
		return nil, nil
	case err != nil:
		return nil, fmt.Errorf("write %s: %w", path, err)
	case !fi.Mode().IsRegular():
		return nil, fmt.Errorf("write %s: %w (%s)", path, ErrNotRegular, inputfile.Kind(fi.Mode()))
	}
	mode := fi.Mode().Perm()
	return &mode, nil
}

// CheckOutput refuses a destination that exists and is not a regular file,
// or that is the same file (same device and inode, symbolic links
// followed) as one of inputs. Callers check before they start reading, so
// that nothing is written.
func CheckOutput(path string, inputs ...string) error {
	if _, err := checkDestination(path); err != nil {
		return err
	}
	out, err := os.Stat(path)
	if err != nil {
		return nil // absent: nothing to destroy
	}
	for _, in := range inputs {
		if fi, err := os.Stat(in); err == nil && os.SameFile(out, fi) {
			if in == path {
				return fmt.Errorf("write %s: %w", path, ErrSameFile)
			}
			return fmt.Errorf("write %s: %w (%s)", path, ErrSameFile, in)
		}
	}
	return nil
}

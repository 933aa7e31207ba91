// Package inputfile opens the files ternkit reads (checkpoints, shards,
// indexes, artifacts, signatures) and refuses anything but a regular file
// before reading a byte: a named pipe would block the reader forever, a
// device would stream without end.
package inputfile

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
)

// ErrNotRegular reports a path that names a named pipe, a device, a socket
// or a directory where a regular file is read.
var ErrNotRegular = errors.New("not a regular file")

// Open opens path for reading. Opening does not block on a named pipe
// (the open is non-blocking where the platform has it), and whatever was
// opened is checked on the open file itself, so a rename between the check
// and the read cannot swap it.
func Open(path string) (*os.File, error) {
	f, err := os.OpenFile(path, os.O_RDONLY|nonblock, 0)
	if err != nil {
		return nil, err
	}
	return check(f, path)
}

// OpenInRoot is Open for a name inside root.
func OpenInRoot(root *os.Root, name string) (*os.File, error) {
	f, err := root.OpenFile(name, os.O_RDONLY|nonblock, 0)
	if err != nil {
		return nil, err
	}
	return check(f, name)
}

func check(f *os.File, path string) (*os.File, error) {
	fi, err := f.Stat()
	if err != nil {
		f.Close()
		return nil, err
	}
	if !fi.Mode().IsRegular() {
		f.Close()
		return nil, &fs.PathError{Op: "open", Path: path, Err: fmt.Errorf("%w (%s)", ErrNotRegular, Kind(fi.Mode()))}
	}
	return f, nil
}

// ReadFile reads the regular file at path whole.
func ReadFile(path string) ([]byte, error) {
	f, err := Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	return io.ReadAll(f)
}

// Kind names a file mode's type in words.
func Kind(m fs.FileMode) string {
	switch {
	case m.IsRegular():
		return "a regular file"
	case m.IsDir():
		return "a directory"
	case m&fs.ModeNamedPipe != 0:
		return "a named pipe"
	case m&fs.ModeSocket != 0:
		return "a socket"
	case m&fs.ModeCharDevice != 0:
		return "a character device"
	case m&fs.ModeDevice != 0:
		return "a device"
	case m&fs.ModeSymlink != 0:
		return "a symbolic link"
	}
	return "not a regular file"
}

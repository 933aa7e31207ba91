package convert

import (
	"errors"
	"fmt"
	"io"
	"os"
)

// fileView gives a walk the bytes of one source file: slices of a
// read-only mapping where the system has one, else buffers read afresh.
type fileView interface {
	// bytes returns the file bytes [a, b); a short read is an
	// *InputError wrapping ErrTruncated, naming tensor.
	bytes(a, b int64, path, tensor string) ([]byte, error)
	// release tells the view that the bytes [a, b) are no longer needed.
	release(a, b int64)
	// offsetOf returns the file offset of address addr, or -1 when addr is
	// not in the view (a fault in a mapping).
	offsetOf(addr uintptr) int64
	close()
}

// readView reads the bytes asked for into fresh buffers.
type readView struct{ f *os.File }

func (v readView) bytes(a, b int64, path, tensor string) ([]byte, error) {
	return readAt(v.f, a, b, path, tensor)
}

func readAt(f *os.File, a, b int64, path, tensor string) ([]byte, error) {
	raw := make([]byte, b-a)
	got, err := f.ReadAt(raw, a)
	if got < len(raw) {
		if err == nil || errors.Is(err, io.EOF) {
			err = io.ErrUnexpectedEOF
		}
		return nil, &InputError{File: path, Tensor: tensor, Offset: a + int64(got),
			Err: fmt.Errorf("%w: read %d of %d bytes: %w", ErrTruncated, got, len(raw), err)}
	}
	return raw, nil
}

func (readView) release(a, b int64)          {}
func (readView) offsetOf(addr uintptr) int64 { return -1 }
func (readView) close()                      {}

package verify

import (
	"errors"
	"fmt"
	"io"
	"runtime/debug"
	"unsafe"
)

// errArtifactChanged reports an artifact file that lost bytes while it was
// being verified, seen as a fault on its memory map.
var errArtifactChanged = errors.New("artifact file changed while being read")

// artifactBytes gives byte ranges of the artifact: slices of a read-only
// memory map of the file when there is one (no copy), or bytes read into a
// buffer.
type artifactBytes struct {
	ra     io.ReaderAt
	mapped []byte // the whole file, or nil
}

// at returns the n bytes at off, in buf (grown if too small) unless the
// file is mapped. Touch mapped bytes only inside guard.
func (b artifactBytes) at(buf []byte, off, n int64) ([]byte, error) {
	if b.mapped != nil {
		if off < 0 || n < 0 || off > int64(len(b.mapped))-n {
			return nil, fmt.Errorf("%d bytes at byte %d: %w", n, off, io.ErrUnexpectedEOF)
		}
		return b.mapped[off : off+n : off+n], nil
	}
	if int64(cap(buf)) < n {
		buf = make([]byte, n)
	}
	p := buf[:n]
	if _, err := b.ra.ReadAt(p, off); err != nil {
		return nil, err
	}
	return p, nil
}

// guard runs fn, which may touch mapped bytes, and turns a fault on the
// map (the file was truncated after it was mapped: the kernel has no page
// to give) into an error wrapping errArtifactChanged, where the program
// would otherwise crash.
func (b artifactBytes) guard(fn func()) (err error) {
	if b.mapped == nil {
		fn()
		return nil
	}
	defer debug.SetPanicOnFault(debug.SetPanicOnFault(true))
	defer func() {
		r := recover()
		if r == nil {
			return
		}
		fault, ok := r.(interface{ Addr() uintptr })
		base := uintptr(unsafe.Pointer(unsafe.SliceData(b.mapped)))
		if !ok || fault.Addr() < base || fault.Addr()-base >= uintptr(len(b.mapped)) {
			panic(r) // not a fault on the map: a bug, not the file
		}
		err = fmt.Errorf("%w: no data at byte %d (truncated?)", errArtifactChanged, fault.Addr()-base)
	}()
	fn()
	return nil
}

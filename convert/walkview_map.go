//go:build linux || darwin || freebsd || netbsd || openbsd

package convert

import (
	"os"
	"unsafe"

	"golang.org/x/sys/unix"
)

// openView maps the file f of size bytes read-only, or falls back to
// reading it when it cannot be mapped (not a regular file, too large for
// the address space).
func openView(f *os.File, size int64) fileView {
	if st, err := f.Stat(); err != nil || !st.Mode().IsRegular() || st.Size() != size || size <= 0 || int64(int(size)) != size {
		return readView{f}
	}
	data, err := unix.Mmap(int(f.Fd()), 0, int(size), unix.PROT_READ, unix.MAP_SHARED)
	if err != nil {
		return readView{f}
	}
	return &mapView{data: data}
}

// mapView hands out slices of a read-only mapping of the whole file. A
// byte of it past the end of a file truncated after it was mapped raises a
// fault (SIGBUS): the goroutines that touch the slices turn it into an
// error with debug.SetPanicOnFault.
type mapView struct{ data []byte }

var pageSize = int64(os.Getpagesize())

func (v *mapView) bytes(a, b int64, path, tensor string) ([]byte, error) {
	return v.data[a:b:b], nil
}

// release drops the pages wholly or partly in [a, b) from the process:
// its resident memory follows the bytes in flight, not the file. A page
// shared with a neighbour still in use is read again from the page cache
// when touched.
func (v *mapView) release(a, b int64) {
	lo := a / pageSize * pageSize
	hi := min(int64(len(v.data)), (b+pageSize-1)/pageSize*pageSize)
	if lo < hi {
		_ = unix.Madvise(v.data[lo:hi], unix.MADV_DONTNEED)
	}
}

func (v *mapView) offsetOf(addr uintptr) int64 {
	base := uintptr(unsafe.Pointer(unsafe.SliceData(v.data)))
	if addr < base || addr-base >= uintptr(len(v.data)) {
		return -1
	}
	return int64(addr - base)
}

func (v *mapView) close() { _ = unix.Munmap(v.data) }

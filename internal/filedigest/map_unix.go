//go:build unix

package filedigest

import (
	"fmt"
	"runtime/debug"
	"syscall"

	"ternkit/internal/inputfile"
)

// FileWorkers is File for a regular file, mapped and hashed by Bytes with
// up to workers goroutines; other files (and files that cannot be mapped)
// are read as File reads them.
func FileWorkers(path string, workers int) (d Digests, err error) {
	f, err := inputfile.Open(path)
	if err != nil {
		return Digests{}, err
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil || !st.Mode().IsRegular() || st.Size() == 0 || int64(int(st.Size())) != st.Size() {
		return File(path)
	}
	data, err := syscall.Mmap(int(f.Fd()), 0, int(st.Size()), syscall.PROT_READ, syscall.MAP_SHARED)
	if err != nil {
		return File(path)
	}
	defer syscall.Munmap(data)
	// a file cut short while mapped faults instead of reading: an error
	defer debug.SetPanicOnFault(debug.SetPanicOnFault(true))
	defer func() {
		r := recover()
		if r == nil {
			return
		}
		if _, fault := r.(interface{ Addr() uintptr }); !fault {
			panic(r) // not a fault on the map: a bug, not the file
		}
		d, err = Digests{}, fmt.Errorf("read %s: changed while read: %v", path, r)
	}()
	return Bytes(data, workers), nil
}

//go:build unix

package verify

import (
	"os"
	"syscall"

	"ternkit/pack"
)

// mapArtifact maps the artifact's file read-only when it is a regular
// file, so that sections are hashed and checked in place; nil when it is
// not one or cannot be mapped, and the sections are read instead. The
// caller unmaps it with unmapArtifact.
func mapArtifact(a *pack.Artifact) []byte {
	f, ok := a.ReaderAt().(*os.File)
	size := a.Size()
	if !ok || size <= 0 || int64(int(size)) != size {
		return nil
	}
	if st, err := f.Stat(); err != nil || !st.Mode().IsRegular() {
		return nil
	}
	conn, err := f.SyscallConn()
	if err != nil {
		return nil
	}
	var data []byte
	_ = conn.Control(func(fd uintptr) {
		data, err = syscall.Mmap(int(fd), 0, int(size), syscall.PROT_READ, syscall.MAP_SHARED)
	})
	if err != nil {
		return nil
	}
	return data
}

func unmapArtifact(data []byte) {
	if data != nil {
		_ = syscall.Munmap(data)
	}
}

// dropPages releases the page table entries of the whole pages in
// data[off:off+n] (madvise MADV_DONTNEED on a read-only shared map: the
// file's bytes stay in the page cache, and a later touch maps them again),
// so that unmapping at the end, one serial call, has less left to do.
func dropPages(data []byte, off, n int64) {
	page := int64(os.Getpagesize())
	from, to := (off+page-1)/page*page, (off+n)/page*page
	if data == nil || from < 0 || to > int64(len(data)) || to-from < dropMin {
		return
	}
	_ = syscall.Madvise(data[from:to], syscall.MADV_DONTNEED)
}

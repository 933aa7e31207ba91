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

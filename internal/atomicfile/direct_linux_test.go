package atomicfile

import (
	"os"
	"path/filepath"
	"syscall"
	"testing"

	"github.com/stretchr/testify/require"
	"golang.org/x/sys/unix"
)

// A file system that accepts O_DIRECT on the file but refuses the writes
// (EINVAL) gets them through the page cache: the bytes are the same.
func TestDirectRefusedFallsBack(t *testing.T) {
	refused := 0
	old := writeAt
	t.Cleanup(func() { writeAt = old })
	writeAt = func(f *os.File, b []byte, off int64) (int, error) {
		flags := 0
		c, err := f.SyscallConn()
		require.NoError(t, err)
		c.Control(func(fd uintptr) { flags, _ = unix.FcntlInt(fd, unix.F_GETFL, 0) })
		if flags&unix.O_DIRECT != 0 {
			refused++
			return 0, &os.PathError{Op: "write", Path: f.Name(), Err: syscall.EINVAL}
		}
		return old(f, b, off)
	}
	path := filepath.Join(t.TempDir(), "out")
	f, err := Create(path, 0o644)
	require.NoError(t, err)
	f.Direct()
	if f.direct == nil {
		t.Skip("this file system refuses O_DIRECT outright")
	}
	want := make([]byte, 2*directStep+3)
	for i := range want {
		want[i] = byte(i * 7)
	}
	_, err = f.Write(want)
	require.NoError(t, err)
	require.NoError(t, f.Commit())
	got, err := os.ReadFile(path)
	require.NoError(t, err)
	require.Equal(t, 1, refused, "refused once, then written through the page cache")
	require.True(t, string(want) == string(got))
}

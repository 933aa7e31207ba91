//go:build unix

package inputfile

import (
	"os"
	"path/filepath"
	"syscall"
	"testing"
	"time"

	"github.com/stretchr/testify/require"
)

// A named pipe, a directory and a device are refused at once, without
// blocking on the pipe; a regular file opens and reads.
func TestOpenRefusesAllButRegularFiles(t *testing.T) {
	dir := t.TempDir()
	fifo := filepath.Join(dir, "pipe")
	require.NoError(t, syscall.Mkfifo(fifo, 0o600))
	regular := filepath.Join(dir, "file")
	require.NoError(t, os.WriteFile(regular, []byte("fernmoss"), 0o600))
	link := filepath.Join(dir, "link")
	require.NoError(t, os.Symlink(regular, link))
	root, err := os.OpenRoot(dir)
	require.NoError(t, err)
	defer root.Close()

	done := make(chan struct{})
	go func() {
		defer close(done)
		for _, c := range []struct{ path, kind string }{{fifo, "a named pipe"}, {dir, "a directory"}, {"/dev/null", "a character device"}} {
			_, err := Open(c.path)
			require.ErrorIs(t, err, ErrNotRegular, c.path)
			require.ErrorContains(t, err, c.kind)
			_, err = ReadFile(c.path)
			require.ErrorIs(t, err, ErrNotRegular, c.path)
		}
		_, err := OpenInRoot(root, "pipe")
		require.ErrorIs(t, err, ErrNotRegular)
		for _, p := range []string{regular, link} {
			b, err := ReadFile(p)
			require.NoError(t, err)
			require.Equal(t, "fernmoss", string(b))
		}
		f, err := OpenInRoot(root, "file")
		require.NoError(t, err)
		require.NoError(t, f.Close())
	}()
	select {
	case <-done:
	case <-time.After(20 * time.Second):
		t.Fatal("opening a named pipe blocked")
	}
}

//go:build unix

package atomicfile

import (
	"os"
	"path/filepath"
	"syscall"
	"testing"

	"github.com/stretchr/testify/require"
)

func TestCreateRefusesNonRegularDestination(t *testing.T) {
	dir := t.TempDir()
	fifo := filepath.Join(dir, "pipe")
	require.NoError(t, syscall.Mkfifo(fifo, 0o600))
	sub := filepath.Join(dir, "sub")
	require.NoError(t, os.Mkdir(sub, 0o755))
	for _, p := range []string{fifo, sub, "/dev/null"} {
		err := WriteFile(p, []byte("x"), 0o644)
		require.ErrorIs(t, err, ErrNotRegular, p)
		require.ErrorIs(t, CheckOutput(p), ErrNotRegular, p)
	}
	fi, err := os.Lstat(fifo)
	require.NoError(t, err)
	require.Equal(t, os.ModeNamedPipe, fi.Mode().Type())
	entries, err := os.ReadDir(dir)
	require.NoError(t, err)
	require.Len(t, entries, 2, "no temporary file")
}

func TestCheckOutputSameFile(t *testing.T) {
	dir := t.TempDir()
	in := filepath.Join(dir, "in")
	require.NoError(t, os.WriteFile(in, []byte("x"), 0o644))
	link := filepath.Join(dir, "link")
	require.NoError(t, os.Symlink(in, link))
	hard := filepath.Join(dir, "hard")
	require.NoError(t, os.Link(in, hard))
	for _, out := range []string{in, link, hard, filepath.Join(dir, ".", "in")} {
		require.ErrorIs(t, CheckOutput(out, in), ErrSameFile, out)
	}
	require.NoError(t, CheckOutput(filepath.Join(dir, "new"), in))
	other := filepath.Join(dir, "other")
	require.NoError(t, os.WriteFile(other, []byte("x"), 0o644))
	require.NoError(t, CheckOutput(other, in))
}

func TestModes(t *testing.T) {
	dir := t.TempDir()
	old := syscall.Umask(0o027)
	defer syscall.Umask(old)
	p := filepath.Join(dir, "f")
	require.NoError(t, WriteFile(p, []byte("a"), 0o666))
	fi, err := os.Stat(p)
	require.NoError(t, err)
	require.Equal(t, os.FileMode(0o640), fi.Mode().Perm(), "the umask applies")
	require.NoError(t, os.Chmod(p, 0o600))
	require.NoError(t, WriteFile(p, []byte("b"), 0o666))
	fi, err = os.Stat(p)
	require.NoError(t, err)
	require.Equal(t, os.FileMode(0o600), fi.Mode().Perm(), "a replaced file keeps its mode")
	k := filepath.Join(dir, "k")
	require.NoError(t, WriteNewFile(k, []byte("k"), 0o600))
	fi, err = os.Stat(k)
	require.NoError(t, err)
	require.Equal(t, os.FileMode(0o600), fi.Mode().Perm())
}

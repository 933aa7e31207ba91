package atomicfile

import (
	"bytes"
	"io/fs"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"
)

// onlyEntries asserts the directory holds exactly the named entries, so no
// temporary file is left behind.
func onlyEntries(t *testing.T, dir string, names ...string) {
	t.Helper()
	entries, err := os.ReadDir(dir)
	require.NoError(t, err)
	var got []string
	for _, e := range entries {
		got = append(got, e.Name())
	}
	require.ElementsMatch(t, names, got)
}

func TestWriteFileModes(t *testing.T) {
	for _, perm := range []fs.FileMode{0o600, 0o644} {
		dir := t.TempDir()
		path := filepath.Join(dir, "out")
		require.NoError(t, WriteFile(path, []byte("first"), perm))
		require.NoError(t, WriteFile(path, []byte("second"), perm), "replaces")
		b, err := os.ReadFile(path)
		require.NoError(t, err)
		require.Equal(t, "second", string(b))
		st, err := os.Stat(path)
		require.NoError(t, err)
		require.Equal(t, perm, st.Mode().Perm())
		onlyEntries(t, dir, "out")
	}
}

func TestWriteNewFileRefusesExisting(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "key")
	require.NoError(t, WriteNewFile(path, []byte("one"), 0o600))
	err := WriteNewFile(path, []byte("two"), 0o600)
	require.ErrorIs(t, err, fs.ErrExist)
	require.Contains(t, err.Error(), path)
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	require.Equal(t, "one", string(b))
	onlyEntries(t, dir, "key")
}

func TestAbortLeavesNothing(t *testing.T) {
	dir := t.TempDir()
	f, err := Create(filepath.Join(dir, "out"), 0o644)
	require.NoError(t, err)
	_, err = f.Write([]byte("partial"))
	require.NoError(t, err)
	require.Equal(t, int64(7), f.Written())
	f.Abort()
	f.Abort()
	onlyEntries(t, dir)
	require.EqualError(t, f.Commit(), "write "+filepath.Join(dir, "out")+": already committed", "no commit after abort")
}

// A failed rename (the destination is a non-empty directory) removes the
// temporary file.
func TestCommitFailureCleansUp(t *testing.T) {
	dir := t.TempDir()
	dst := filepath.Join(dir, "taken")
	require.NoError(t, os.MkdirAll(filepath.Join(dst, "inside"), 0o755))
	err := WriteFile(dst, []byte("x"), 0o644)
	require.Error(t, err)
	require.Contains(t, err.Error(), dst)
	onlyEntries(t, dir, "taken")
}

func TestCreateInMissingDirectory(t *testing.T) {
	_, err := Create(filepath.Join(t.TempDir(), "no", "such", "out"), 0o644)
	require.ErrorIs(t, err, fs.ErrNotExist)
}

// WriteAt fills in bytes already written, as a header is filled in last,
// and refuses a range past what was written.
func TestWriteAt(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "out")
	f, err := Create(path, 0o644)
	require.NoError(t, err)
	defer f.Abort()
	_, err = f.Write([]byte("....body"))
	require.NoError(t, err)
	require.NoError(t, f.WriteAt([]byte("HEAD"), 0))
	require.EqualError(t, f.WriteAt([]byte("xy"), 7), "write "+path+": 2 bytes at 7 lie outside the 8 written", "past the end")
	require.EqualError(t, f.WriteAt([]byte("x"), -1), "write "+path+": 1 bytes at -1 lie outside the 8 written")
	_, err = f.Write([]byte("!"))
	require.NoError(t, err)
	require.Equal(t, int64(9), f.Written())
	require.NoError(t, f.Commit())
	b, err := os.ReadFile(path)
	require.NoError(t, err)
	require.Equal(t, "HEADbody!", string(b))
}

// A file larger than several writeback steps, written in pieces of odd
// sizes, commits with every byte in place: starting the writeback early
// changes when the bytes reach the disk, never which bytes.
func TestWriteLargeFileInPieces(t *testing.T) {
	path := filepath.Join(t.TempDir(), "big")
	f, err := Create(path, 0o644)
	require.NoError(t, err)
	defer f.Abort()
	want := make([]byte, 3*writebackStep+12345)
	for i := range want {
		want[i] = byte(i * 7 / 3)
	}
	for off := 0; off < len(want); {
		n := min(len(want)-off, 1+off%(5<<20))
		_, err := f.Write(want[off : off+n])
		require.NoError(t, err)
		off += n
	}
	require.NoError(t, f.Commit())
	got, err := os.ReadFile(path)
	require.NoError(t, err)
	require.True(t, bytes.Equal(want, got))
}

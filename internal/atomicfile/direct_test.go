package atomicfile

import (
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"
)

// A file written in direct mode holds exactly the bytes written, in writes
// of any length across the 8 MiB runs, with a header filled in at the end
// (WriteAt), or in the middle, after which writing goes on buffered.
func TestDirectWritesTheSameBytes(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for _, c := range []struct {
		size, headerAt int // headerAt: WriteAt after this many bytes (-1: at the end)
	}{
		{0, -1}, {1, -1}, {directAlign - 1, -1}, {directAlign, -1}, {directStep - 1, -1},
		{directStep, -1}, {directStep + 5000, -1}, {2*directStep + 123, -1},
		{2*directStep + 123, directStep + 77}, {3 * directAlign, 10},
	} {
		want := make([]byte, c.size)
		for i := range want {
			want[i] = byte(rng.Uint32())
		}
		path := filepath.Join(t.TempDir(), "out")
		f, err := Create(path, 0o644)
		require.NoError(t, err)
		f.Direct()
		t.Logf("size %d: direct mode %v", c.size, f.direct != nil)
		header := []byte("FERN")
		for pos := 0; pos < c.size; {
			n := min(1+rng.IntN(3*directStep/2), c.size-pos)
			if rng.IntN(3) == 0 {
				n = min(1+rng.IntN(300), c.size-pos)
			}
			if c.headerAt >= 0 && pos <= c.headerAt && c.headerAt < pos+n {
				n = c.headerAt - pos + 1
			}
			got, err := f.Write(want[pos : pos+n])
			require.NoError(t, err)
			require.Equal(t, n, got)
			pos += n
			require.Equal(t, int64(pos), f.Written())
			if pos == c.headerAt+1 {
				require.NoError(t, f.WriteAt(header, 0))
				require.Nil(t, f.direct, "WriteAt ends direct mode")
			}
		}
		if c.headerAt < 0 && c.size >= len(header) {
			require.NoError(t, f.WriteAt(header, 0))
		}
		if c.size >= len(header) {
			copy(want, header)
		}
		require.NoError(t, f.Commit())
		got, err := os.ReadFile(path)
		require.NoError(t, err)
		require.Equal(t, len(want), len(got), "size %d", c.size)
		require.True(t, string(want) == string(got), "size %d: bytes differ", c.size)
		onlyEntries(t, filepath.Dir(path), "out")
	}
}

// Direct after the first byte is written does nothing.
func TestDirectOnlyAtTheStart(t *testing.T) {
	path := filepath.Join(t.TempDir(), "out")
	f, err := Create(path, 0o644)
	require.NoError(t, err)
	defer f.Abort()
	_, err = f.Write([]byte("x"))
	require.NoError(t, err)
	f.Direct()
	require.Nil(t, f.direct)
}

// Abort in direct mode stops the writer and leaves nothing behind.
func TestDirectAbort(t *testing.T) {
	dir := t.TempDir()
	f, err := Create(filepath.Join(dir, "out"), 0o644)
	require.NoError(t, err)
	f.Direct()
	_, err = f.Write(make([]byte, 2*directStep+10))
	require.NoError(t, err)
	f.Abort()
	require.Nil(t, f.direct)
	onlyEntries(t, dir)
}

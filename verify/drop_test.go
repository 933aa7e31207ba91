//go:build unix

package verify

import (
	"bytes"
	"os"
	"path/filepath"
	"syscall"
	"testing"

	"github.com/stretchr/testify/require"
)

// Letting go of a mapped range keeps the file's bytes: read again through
// the map and from the file, they are the same.
func TestDropPagesKeepsBytes(t *testing.T) {
	want := make([]byte, 3<<20+123)
	for i := range want {
		want[i] = byte(i*31 + i>>12)
	}
	path := filepath.Join(t.TempDir(), "a.bin")
	require.NoError(t, os.WriteFile(path, want, 0o644))
	f, err := os.Open(path)
	require.NoError(t, err)
	defer f.Close()
	data, err := syscall.Mmap(int(f.Fd()), 0, len(want), syscall.PROT_READ, syscall.MAP_SHARED)
	require.NoError(t, err)
	defer syscall.Munmap(data)
	require.True(t, bytes.Equal(want, data))
	b := artifactBytes{mapped: data, drop: true}
	b.done(5, int64(len(want))-10)
	b.done(0, int64(len(want)))
	require.True(t, bytes.Equal(want, data), "the map's bytes changed")
	onDisk, err := os.ReadFile(path)
	require.NoError(t, err)
	require.True(t, bytes.Equal(want, onDisk), "the file's bytes changed")
}

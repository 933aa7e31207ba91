package filedigest

import (
	"bytes"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/internal/outsidetool"
)

// The SHA-256 is sha256sum's (GNU coreutils, always on Debian), the BLAKE3
// the library's one-shot sum.
func TestFileAgainstSHA256Sum(t *testing.T) {
	sha256sum := outsidetool.Require(t, "sha256sum", "coreutils")
	dir := t.TempDir()
	for _, n := range []int{0, 1, 63, 64, 65, 1 << 20, 3<<20 + 5} {
		data := bytes.Repeat([]byte("fernmoss seed vault "), n/20+1)[:n]
		path := filepath.Join(dir, "f")
		require.NoError(t, os.WriteFile(path, data, 0o644))
		d, err := File(path)
		require.NoError(t, err)
		out, err := exec.Command(sha256sum, path).Output()
		require.NoError(t, err)
		want, _, _ := strings.Cut(string(out), " ")
		require.Equal(t, want, d.SHA256, "%d bytes", n)
		b3 := blake3.Sum256(data)
		require.Equal(t, b3[:], mustHex(t, d.BLAKE3))
		// the parallel path: the same digests, mapped or in memory
		for _, workers := range []int{1, 2, 3} {
			require.Equal(t, d, Bytes(data, workers), "%d bytes, %d workers", n, workers)
			pd, err := FileWorkers(path, workers)
			require.NoError(t, err)
			require.Equal(t, d, pd, "%d bytes, %d workers", n, workers)
		}
	}
	_, err := File(filepath.Join(dir, "missing"))
	require.ErrorIs(t, err, os.ErrNotExist)
}

func mustHex(t *testing.T, s string) []byte {
	t.Helper()
	b := make([]byte, len(s)/2)
	for i := range b {
		var v byte
		for _, c := range s[2*i : 2*i+2] {
			v <<= 4
			switch {
			case c >= '0' && c <= '9':
				v |= byte(c - '0')
			case c >= 'a' && c <= 'f':
				v |= byte(c-'a') + 10
			default:
				t.Fatalf("not lowercase hex: %q", s)
			}
		}
		b[i] = v
	}
	return b
}

// What SHA-256 adds to the BLAKE3 pass over an artifact's bytes (already
// in memory, as after a write or a verify):
// go test ./internal/filedigest -bench . -benchtime 20x
func BenchmarkDigests(b *testing.B) {
	data := bytes.Repeat([]byte{0x5a, 0x13, 0xc7, 0x01}, 16<<20) // 64 MiB
	b.Run("blake3", func(b *testing.B) {
		b.SetBytes(int64(len(data)))
		for b.Loop() {
			h := blake3.New()
			h.Write(data)
			h.Sum(nil)
		}
	})
	b.Run("blake3+sha256", func(b *testing.B) {
		b.SetBytes(int64(len(data)))
		for b.Loop() {
			h := New()
			h.Write(data)
			h.Digests()
		}
	})
}

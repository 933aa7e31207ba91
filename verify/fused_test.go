package verify

import (
	"bytes"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/internal/treehash"
	"ternkit/manifest"
	"ternkit/pack"
)

// Hashing block by block while checking gives the one-pass BLAKE3
// (github.com/zeebo/blake3, an independent implementation), and a piece's
// chaining value that of pack.PieceCV, at every length around blocks and
// chunks; the checker sees every byte once, in order.
func TestHashCheckingMatchesOnePass(t *testing.T) {
	lengths := []int{0, 1, 1023, 1024, 1025, fuseBlock - 1, fuseBlock, fuseBlock + 1,
		3*fuseBlock + 5000, 2 * fuseBlock, manifest.ChunkSize - 1, manifest.ChunkSize}
	for _, n := range lengths {
		data := make([]byte, n)
		for i := range data {
			data[i] = byte(i*7 + i/1000)
		}
		var seen bytes.Buffer
		h := treehash.New()
		require.NoError(t, hashChecking(h, data, 0, &seen))
		require.Equal(t, blake3.Sum256(data), h.Sum(), "length %d", n)
		require.True(t, bytes.Equal(data, seen.Bytes()), "length %d: the checker saw other bytes", n)
		if n == 0 {
			continue
		}
		for _, k := range []int{1, 5} {
			at := uint64(k) * manifest.ChunkSize / treehash.ChunkSize
			p := treehash.NewAt(at)
			require.NoError(t, hashChecking(p, data, at, nil))
			require.Equal(t, pack.PieceCV(data, k), p.CV(), "length %d piece %d", n, k)
		}
	}
}

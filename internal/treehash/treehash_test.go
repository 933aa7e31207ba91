package treehash

import (
	"bytes"
	"encoding/hex"
	"math/rand/v2"
	"os"
	"os/exec"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/internal/outsidetool"
)

// BLAKE3's published test input: byte i is i mod 251 (the BLAKE3 test
// vectors use it; from memory).
func input(n int) []byte {
	b := make([]byte, n)
	for i := range b {
		b[i] = byte(i % 251)
	}
	return b
}

// lengths around every boundary the tree has: chunk, 16-chunk buffer,
// power-of-two subtrees
var lengths = []int{0, 1, 63, 64, 65, 1023, 1024, 1025, 2048, 2049, 3072, 8191, 8192,
	16383, 16384, 16385, 31744, 65536, 100000, 1 << 20, 1<<20 + 1, 3<<20 - 1, 5 << 20}

// Writes in any split give the hash of one pass (github.com/zeebo/blake3,
// an independent implementation, is the reference).
func TestWriteMatchesReference(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for _, n := range lengths {
		data := input(n)
		want := blake3.Sum256(data)
		for trial := range 4 {
			h := New()
			rest := data
			for len(rest) > 0 {
				k := min(len(rest), rng.IntN(3*ChunkSize+1)+trial*5000)
				h.Write(rest[:k])
				rest = rest[k:]
			}
			require.Equal(t, want, h.Sum(), "length %d trial %d", n, trial)
			require.Equal(t, int64(n), h.Len())
		}
	}
}

// Subtrees computed apart and joined, with bytes between them, give the
// same hash.
func TestSubtreesMatchReference(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for _, n := range lengths {
		data := input(n)
		want := blake3.Sum256(data)
		for trial := range 6 {
			h := New()
			off := 0
			for off < n {
				if off%ChunkSize == 0 && rng.IntN(2) == 0 {
					chunks := uint64(n-off) / ChunkSize
					if chunks > 0 {
						spans := Spans(uint64(off/ChunkSize), chunks)
						c := spans[0]
						require.True(t, h.AddSubtree(Subtree(data[off:off+int(c)*ChunkSize], uint64(off/ChunkSize))))
						off += int(c) * ChunkSize
						continue
					}
				}
				k := min(n-off, rng.IntN(2*ChunkSize)+1)
				h.Write(data[off : off+k])
				off += k
			}
			require.Equal(t, want, h.Sum(), "length %d trial %d", n, trial)
		}
	}
}

// A subtree in the wrong place is refused and changes nothing.
func TestAddSubtreeRefusesMisplaced(t *testing.T) {
	data := input(8 * ChunkSize)
	h := New()
	h.Write(data[:100])
	require.False(t, h.AddSubtree(Subtree(data[ChunkSize:2*ChunkSize], 1)), "mid-chunk")
	h = New()
	h.Write(data[:ChunkSize])
	require.False(t, h.AddSubtree(Subtree(data[2*ChunkSize:3*ChunkSize], 2)), "wrong chunk number")
	require.Panics(t, func() { Subtree(data[:3*ChunkSize], 0) }, "three chunks")
	require.Panics(t, func() { Subtree(data[:2*ChunkSize], 1) }, "unaligned")
	h.Write(data[ChunkSize:])
	require.Equal(t, blake3.Sum256(data), h.Sum())
}

// Equal pieces hashed apart (NewAt) give the chaining values of the
// nodes of the whole's tree: joined as subtrees they give the whole's hash,
// the last, shorter piece included.
func TestPieceCVsJoin(t *testing.T) {
	const piece = 4 * ChunkSize
	for _, n := range []int{2 * piece, 3*piece + 100, 5*piece + piece - 1, 7*piece + ChunkSize} {
		data := input(n)
		var cvs []CV
		for off := 0; off < n; off += piece {
			h := NewAt(uint64(off / ChunkSize))
			h.Write(data[off:min(n, off+piece)])
			cvs = append(cvs, h.CV())
		}
		// the same values from full subtrees
		for i := 0; i < n/piece; i++ {
			if (i+1)*piece < n {
				require.Equal(t, Subtree(data[i*piece:(i+1)*piece], uint64(i*piece/ChunkSize)).CV(), cvs[i])
			}
		}
		sum, ok := JoinCVs(cvs, uint64(piece/ChunkSize))
		require.True(t, ok)
		require.Equal(t, blake3.Sum256(data), sum, "length %d", n)
		_, ok = JoinCVs(cvs[:1], uint64(piece/ChunkSize))
		require.False(t, ok, "one piece")
	}
}

func TestSum256Parallel(t *testing.T) {
	for _, n := range []int{0, 5, 1 << 20, 2<<20 - 1, 2 << 20, 9<<20 + 12345} {
		data := input(n)
		for _, w := range []int{1, 2, 3, 8} {
			require.Equal(t, blake3.Sum256(data), Sum256(data, w), "length %d workers %d", n, w)
		}
	}
}

func TestSpans(t *testing.T) {
	require.Equal(t, []uint64{1, 4, 2, 1}, Spans(3, 8)) // chunks 3, 4-7, 8-9, 10
	require.Equal(t, []uint64{8}, Spans(8, 8))
	require.Empty(t, Spans(5, 0))
}

// b3sum (Debian package b3sum), the BLAKE3 team's command-line tool, on a
// file the parallel path hashes.
func TestSum256AgainstB3sum(t *testing.T) {
	path := outsidetool.Require(t, "b3sum", "b3sum")
	data := input(7<<20 + 999)
	file := t.TempDir() + "/in"
	require.NoError(t, os.WriteFile(file, data, 0o644))
	out, err := exec.Command(path, "--no-names", file).Output()
	require.NoError(t, err)
	sum := Sum256(data, 2)
	require.Equal(t, strings.TrimSpace(string(out)), hex.EncodeToString(sum[:]))
	require.True(t, bytes.Equal(sum[:], func() []byte { s := blake3.Sum256(data); return s[:] }()))
}

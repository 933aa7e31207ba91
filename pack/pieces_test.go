package pack

import (
	"bytes"
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/internal/outsidetool"
	"ternkit/internal/testweights"
	"ternkit/manifest"
)

func randomBytes(seed uint64, n int) []byte {
	rng := rand.New(rand.NewPCG(seed, 7))
	b := make([]byte, n)
	for i := range b {
		b[i] = byte(rng.Uint32())
	}
	return b
}

// sectionLengths straddle the piece size: none, one piece (whole or not),
// two pieces with a 1-byte or whole last one, and three with a short one.
var sectionLengths = []int{0, 1, 1024, 5000, manifest.ChunkSize - 1, manifest.ChunkSize,
	manifest.ChunkSize + 1, 2 * manifest.ChunkSize, 2*manifest.ChunkSize + 12345}

// The section's BLAKE3 joined from its piece chaining values is the plain
// BLAKE3 of its bytes, as github.com/zeebo/blake3 (a reference
// implementation of the standard hash) computes it in one pass; and bytes
// given in runs of any length give the same entry, for any worker count.
func TestSectionPiecesJoinToBLAKE3(t *testing.T) {
	for _, n := range sectionLengths {
		p := randomBytes(uint64(n), n)
		want := manifest.HexHash(blake3.Sum256(p))
		s := sectionOf(p, 2)
		require.Equal(t, want, s.BLAKE3, "%d bytes", n)
		require.Len(t, s.PieceCVs, manifest.NumChunks(int64(n)), "%d bytes", n)
		require.Empty(t, s.Chunks)
		require.Equal(t, s, sectionOf(p, 1), "%d bytes: one worker", n)
		for _, run := range []int{1 << 20, 3<<20 + 7, manifest.ChunkSize, 3 * manifest.ChunkSize} {
			h := newSectionHasher(2)
			for o := 0; o < n; o += run {
				h.Write(p[o:min(o+run, n)])
			}
			require.Equal(t, s, h.section(), "%d bytes in runs of %d", n, run)
		}
		for k, cv := range s.PieceCVs {
			// a piece's chaining value is not the BLAKE3 of its bytes
			// alone (the 1.0–1.3 chunk hash): the format's reason to name it apart
			o := k * manifest.ChunkSize
			alone := blake3.Sum256(p[o:min(o+manifest.ChunkSize, n)])
			require.NotEqual(t, manifest.HexHash(alone), cv)
		}
	}
}

// The same, against b3sum (Debian's b3sum package) over the section's
// byte range in an artifact-like file: what FORMAT.md promises a user can
// reproduce.
func TestSectionHashAgainstB3sum(t *testing.T) {
	b3sum := outsidetool.Require(t, "b3sum", "b3sum")
	dir := t.TempDir()
	for _, n := range []int{manifest.ChunkSize + 1, 2*manifest.ChunkSize + 12345} {
		p := randomBytes(uint64(n)+1, n)
		path := filepath.Join(dir, fmt.Sprint(n))
		require.NoError(t, os.WriteFile(path, p, 0o644))
		out, err := exec.Command(b3sum, "--no-names", path).Output()
		require.NoError(t, err)
		require.Equal(t, strings.TrimSpace(string(out)), sectionOf(p, 2).BLAKE3, "%d bytes", n)
	}
}

// A changed byte in piece k fails the section naming piece k and its
// offset, for format 1.4's chaining values; the 1.0–1.3 chunk hashes name
// the chunk the same way.
func TestCheckSectionNamesBadPiece(t *testing.T) {
	n := 3*manifest.ChunkSize + 999
	p := randomBytes(5, n)
	s := sectionOf(p, 2)
	s.Offset = 640
	fail := func(off int64, err error) error { return fmt.Errorf("at byte %d: %w", off, err) }
	require.NoError(t, checkSectionBytes(p, s, "section", 2, fail))
	for k := range 4 {
		bad := bytes.Clone(p)
		bad[k*manifest.ChunkSize+17] ^= 0x40
		err := checkSectionBytes(bad, s, "section", 2, fail)
		require.ErrorIs(t, err, ErrHash)
		require.Contains(t, err.Error(), fmt.Sprintf("at byte %d: ", 640+k*manifest.ChunkSize))
		require.Contains(t, err.Error(), fmt.Sprintf("piece %d (bytes %d..", k, k*manifest.ChunkSize))
	}
	// a record changed, the bytes intact: the piece still fails
	forged := s
	forged.PieceCVs = append([]string{}, s.PieceCVs...)
	forged.PieceCVs[2] = forged.PieceCVs[1]
	require.ErrorContains(t, checkSectionBytes(p, forged, "section", 2, fail), "piece 2 ")
	// the pieces hold, the section's hash does not
	forged = s
	forged.BLAKE3 = manifest.HexHash([32]byte{9})
	require.ErrorIs(t, checkSectionBytes(p, forged, "section", 2, fail), ErrHash)

	old := manifest.Section{Offset: 640, Length: int64(n), BLAKE3: s.BLAKE3, Chunks: chunkHashes(p)}
	require.NoError(t, checkSectionBytes(p, old, "section", 2, fail))
	bad := bytes.Clone(p)
	bad[2*manifest.ChunkSize] ^= 1
	old.BLAKE3 = manifest.HexHash(blake3.Sum256(bad)) // only the chunk hash can catch it
	require.ErrorContains(t, checkSectionBytes(bad, old, "section", 2, fail), "chunk 2 ")
}

// Artifacts are byte-identical for any worker count and byte budget: a
// ternary payload over 4 MiB (its piece chaining values computed in
// parallel), a large kept tensor (in pieces, or whole), an int8 tensor and
// small ones; and every section over 4 MiB records chaining values whose
// join is the section's plain BLAKE3 (github.com/zeebo/blake3).
func TestBuildSameBytesAnyWorkers(t *testing.T) {
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(61, 62))
	const rows, cols = 2100, 8200 // bits2: 4,305,000 bytes, two pieces
	w := make([]float32, rows*cols)
	for i := range w {
		w[i] = float32(rng.NormFloat64())
	}
	big := randomBytes(63, 9<<20+77)
	src := filepath.Join(dir, "src.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "blocks.0.mlp.w", DType: "F32", Shape: []int64{rows, cols}, Data: testweights.F32Bytes(w)},
		{Name: "embed.tokens.weight", DType: "U8", Shape: []int64{int64(len(big))}, Data: big},
		{Name: "blocks.1.attn.q.weight", DType: "F32", Shape: []int64{8, 16}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 128))},
	}, nil))
	build := func(name string, workers int, budget int64) []byte {
		s, err := convert.Open(src)
		require.NoError(t, err)
		defer s.Close()
		dst := filepath.Join(dir, name+Extension)
		_, err = Build(s, dst, Options{Codec: Bits2, Recipe: convert.DefaultRecipe(), Tool: "ternkit test", Workers: workers, Budget: budget})
		require.NoError(t, err)
		return readFile(t, dst)
	}
	want := build("w1", 1, 0)
	for _, c := range []struct {
		workers int
		budget  int64
	}{{2, 0}, {3, 0}, {2, 1}, {4, 1}} {
		require.True(t, bytes.Equal(want, build(fmt.Sprintf("w%d-b%d", c.workers, c.budget), c.workers, c.budget)), "%d workers, budget %d", c.workers, c.budget)
	}
	a, err := NewReader(bytes.NewReader(want), int64(len(want)))
	require.NoError(t, err)
	require.NoError(t, a.Check())
	pieced := 0
	for _, e := range a.Tensors() {
		s := e.Section
		if len(s.PieceCVs) == 0 {
			continue
		}
		pieced++
		require.Equal(t, manifest.HexHash(blake3.Sum256(want[s.Offset:s.Offset+s.Length])), s.BLAKE3, e.Name)
	}
	require.Equal(t, 2, pieced, "the ternary payload and the kept tensor are over 4 MiB")
	require.Equal(t, manifest.KindTernary, a.Tensors()[0].Kind)
	require.Len(t, a.Tensors()[0].Section.PieceCVs, 2)
}

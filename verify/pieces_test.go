package verify

import (
	"encoding/json"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/testweights"
	"ternkit/manifest"
	"ternkit/pack"
)

// bigTernaryArtifact packs one ternary tensor whose bits2 payload spans two
// pieces (4100 × 4100 trits: 4,202,500 bytes), and returns the artifact
// and its manifest entry.
func bigTernaryArtifact(t *testing.T, dir string) (string, manifest.Tensor) {
	rng := rand.New(rand.NewPCG(41, 42))
	const rows, cols = 4100, 4100
	src := filepath.Join(dir, "wide.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{{Name: "wide.w", DType: "F32", Shape: []int64{rows, cols},
		Data: testweights.F32Bytes(testweights.Gaussian(rng, rows*cols))}}, nil))
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	art := filepath.Join(dir, "wide.tkart")
	m, err := pack.Build(s, art, pack.Options{Codec: pack.Bits2, Recipe: convert.DefaultRecipe(), Policy: convert.DefaultPolicy()})
	require.NoError(t, err)
	e := m.Tensors[0]
	require.Equal(t, manifest.KindTernary, e.Kind)
	require.Len(t, e.Section.PieceCVs, 2)
	return art, e
}

// A ternary payload of two pieces is counted piece by piece: the counts
// add up to the manifest's, a forged count fails, and a code 3 planted in
// the second piece (hashes recomputed, so only the decode can see it) is
// named.
func TestVerifyCountsTritsByPiece(t *testing.T) {
	dir := t.TempDir()
	art, e := bigTernaryArtifact(t, dir)
	rep, err := Run(art, Options{})
	require.NoError(t, err)
	require.True(t, rep.OK(), "%+v", rep.Failures())

	forged := filepath.Join(dir, "counts.tkart")
	rewriteManifest(t, art, forged, func(m map[string]any) {
		tr := entry(m, 0)["trits"].(map[string]any)
		neg, _ := tr["neg"].(json.Number).Int64()
		zero, _ := tr["zero"].(json.Number).Int64()
		tr["neg"], tr["zero"] = neg+1, zero-1
	})
	rep, err = Run(forged, Options{Workers: 2})
	require.NoError(t, err)
	require.Equal(t, []string{fmt.Sprintf("%s wide.w: trit counts %+v, manifest records %+v", CheckDecode, *e.Trits,
		convert.TritCounts{Neg: e.Trits.Neg + 1, Zero: e.Trits.Zero - 1, Pos: e.Trits.Pos})}, failuresOf(rep))

	b, err := os.ReadFile(art)
	require.NoError(t, err)
	at := e.Section.Offset + manifest.ChunkSize + 3
	b[at] = 0xff // four codes 3
	planted := filepath.Join(dir, "planted.tkart")
	require.NoError(t, os.WriteFile(planted, b, 0o644))
	p := b[e.Section.Offset : e.Section.Offset+e.Section.Length]
	cvs := pack.PieceCVs(p, 2)
	rewriteManifest(t, planted, planted, func(m map[string]any) {
		sec := entry(m, 0)["section"].(map[string]any)
		sec["blake3"] = manifest.HexHash(pack.JoinPieceCVs(cvs))
		sec["piece_cvs"] = []string{manifest.HexHash(cvs[0]), manifest.HexHash(cvs[1])}
	})
	for _, workers := range []int{1, 2} {
		rep, err = Run(planted, Options{Workers: workers})
		require.NoError(t, err)
		f := rep.Failures()
		require.Len(t, f, 1, "%+v", f)
		require.Equal(t, CheckDecode, f[0].Name)
		require.Contains(t, f[0].Detail, fmt.Sprintf("piece at byte %d", e.Section.Offset+manifest.ChunkSize))
	}
}

// The chunk hashes of formats 1.2 and 1.3 are still checked: the vector
// with a companion of two pieces verifies, the one whose second chunk hash
// is wrong (its section hash right) fails naming that chunk.
func TestVerifyChunkHashesOfFormat13(t *testing.T) {
	rep, err := Run("../testdata/vectors/ok-chunks.tkart", Options{})
	require.NoError(t, err)
	require.True(t, rep.OK(), "%+v", rep.Failures())
	rep, err = Run("../testdata/vectors/bad-chunk-hash.tkart", Options{})
	require.NoError(t, err)
	f := rep.Failures()
	require.Len(t, f, 1)
	require.Equal(t, CheckSection, f[0].Name)
	require.Contains(t, f[0].Detail, "does not match its recorded BLAKE3")
}

package pack

import (
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/internal/testweights"
	"ternkit/manifest"
)

// Tensors across the source's 4 MiB segments (one quantized, one kept in
// pieces) give the same artifact bytes for any worker count and budget;
// each entry records the source span identity of its bytes and each kept
// section the BLAKE3 of the source bytes (github.com/zeebo/blake3 over the
// bytes read here).
func TestBuildSegmentsAnyWorkers(t *testing.T) {
	defer func(n int64) { keptPieceSize = n }(keptPieceSize)
	keptPieceSize = 1 << 20
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(8, 9))
	src := filepath.Join(dir, "vault.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "a.norm", DType: "F32", Shape: []int64{7}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 7))},
		{Name: "b.proj.weight", DType: "F32", Shape: []int64{1100, 1000}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 1_100_000))},
		{Name: "c.embed", DType: "F32", Shape: []int64{1500, 1001}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 1_501_500))},
		{Name: "d.norm", DType: "F32", Shape: []int64{3}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 3))},
	}, map[string]string{"vault": "Fernmoss"}))
	file := readFile(t, src)
	ref := filepath.Join(dir, "ref"+Extension)
	buildWith(t, src, ref, Options{PolicyRules: testRules, Workers: 1})
	want := readFile(t, ref)
	for _, workers := range []int{2, 5} {
		for _, budget := range []int64{1, 1 << 30} {
			t.Run("workers="+strconv.Itoa(workers)+",budget="+strconv.FormatInt(budget, 10), func(t *testing.T) {
				dst := filepath.Join(t.TempDir(), "w"+Extension)
				buildWith(t, src, dst, Options{PolicyRules: testRules, Workers: workers, Budget: budget})
				require.Equal(t, want, readFile(t, dst))
			})
		}
	}
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	a, err := Open(ref)
	require.NoError(t, err)
	defer a.Close()
	require.NoError(t, a.Check())
	require.Equal(t, manifest.HexHash(blake3.Sum256(file)), a.Manifest().Source.Files[0].BLAKE3)
	for _, st := range s.Tensors {
		tn, err := a.Tensor(st.Name)
		require.NoError(t, err)
		e := tn.Entry
		require.Equal(t, manifest.HexHash(convert.SpanIdentity(file, st.Offset, st.Offset+st.Length)), e.SourceSpan, st.Name)
		require.Empty(t, e.SourceBLAKE3)
		if e.Kind == manifest.KindKept {
			require.Equal(t, manifest.HexHash(blake3.Sum256(file[st.Offset:st.Offset+st.Length])), e.Section.BLAKE3, st.Name)
		}
	}
	_ = os.Remove(ref)
}

package verify

import (
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/manifest"
	"ternkit/pack"
)

// olderArtifact rewrites art as a writer of source_blake3 records it (the
// only kind of formats 1.0 to 1.3, still valid in 1.4): each tensor's
// source by the BLAKE3 of its bytes.
func olderArtifact(t *testing.T, art string, data map[string][]byte) string {
	t.Helper()
	out := filepath.Join(t.TempDir(), "older.tkart")
	rewriteManifest(t, art, out, func(m map[string]any) {
		for _, x := range tensorsOf(m) {
			x := x.(map[string]any)
			delete(x, "source_span")
			x["source_blake3"] = manifest.HexHash(blake3.Sum256(data[x["name"].(string)]))
		}
	})
	return out
}

// verify --against checks a format 1.4 artifact by the source span
// identities and an older one by the BLAKE3 of each tensor's bytes; a
// changed source byte fails the source check of its tensor alone, in the
// words of the identity the artifact records.
func TestAgainstSourceIdentityKinds(t *testing.T) {
	for _, piece := range []int64{keptPieceSize, 1} { // kept tensors whole, and in pieces
		t.Run(fmt.Sprint(piece), func(t *testing.T) {
			defer func(n int64) { keptPieceSize = n }(keptPieceSize)
			keptPieceSize = piece
			againstSourceIdentityKinds(t)
		})
	}
}

func againstSourceIdentityKinds(t *testing.T) {
	dir := t.TempDir()
	src, art, data := bf16Fixture(t, dir, pack.Base3)
	older := olderArtifact(t, art, data)
	a, err := pack.Open(older)
	require.NoError(t, err)
	require.Empty(t, a.Manifest().Tensors[0].SourceSpan)
	a.Close()

	for _, path := range []string{art, older} {
		rep := runAgainst(t, path, src)
		require.True(t, rep.OK(), "%s: %v", path, failuresOf(rep))
	}

	name := "blocks.0.norm.weight" // kept as it is: its section is the source's bytes
	raw, err := os.ReadFile(src)
	require.NoError(t, err)
	at := strings.Index(string(raw), string(data[name]))
	require.GreaterOrEqual(t, at, 0)
	raw[at+1] ^= 0x01
	changed := filepath.Join(t.TempDir(), "changed.safetensors")
	require.NoError(t, os.WriteFile(changed, raw, 0o644))
	for path, words := range map[string]string{art: "source bytes or place at ", older: "source bytes at "} {
		rep := runAgainst(t, path, changed)
		require.False(t, rep.OK())
		for _, c := range rep.Checks {
			if c.Name != CheckSourceHash {
				continue
			}
			if c.Tensor == name {
				require.False(t, c.OK, path)
				require.True(t, strings.HasPrefix(c.Detail, words), c.Detail)
			} else {
				require.True(t, c.OK, "%s: %s", path, c.Tensor)
			}
		}
	}
}

// A large kept tensor (format 1.4) comes in pieces compared with its
// section's bytes: a source byte changed under a source span rewritten to
// match is named by its place in the section, and so is one in a tensor
// that comes whole.
func TestAgainstKeptComparedByBytes(t *testing.T) {
	defer func(n int64) { keptPieceSize = n }(keptPieceSize)
	keptPieceSize = 1 << 20
	dir := t.TempDir()
	big := make([]byte, 5<<20+3)
	for i := range big {
		big[i] = byte(i*7 + i>>9)
	}
	src := filepath.Join(dir, "vault.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "embed.tokens.weight", DType: "U8", Shape: []int64{int64(len(big))}, Data: big},
		{Name: "small.embed", DType: "U8", Shape: []int64{5}, Data: []byte{1, 2, 3, 4, 5}},
	}, nil))
	s, err := convert.Open(src)
	require.NoError(t, err)
	tensors := s.Tensors
	art := filepath.Join(dir, "a.tkart")
	_, err = pack.Build(s, art, pack.Options{Codec: pack.Base3, Recipe: convert.DefaultRecipe()})
	require.NoError(t, err)
	s.Close()
	rep := runAgainst(t, art, src)
	require.True(t, rep.OK(), "%v", failuresOf(rep))

	for _, c := range []struct {
		tensor *convert.Tensor
		at     int64
	}{{tensors[0], 4<<20 + 17}, {tensors[1], 3}} {
		raw, err := os.ReadFile(src)
		require.NoError(t, err)
		raw[c.tensor.Offset+c.at] ^= 0x10
		changed := filepath.Join(t.TempDir(), "changed.safetensors")
		require.NoError(t, os.WriteFile(changed, raw, 0o644))
		out := filepath.Join(t.TempDir(), "t.tkart")
		rewriteManifest(t, art, out, func(m map[string]any) {
			for _, x := range tensorsOf(m) {
				if x := x.(map[string]any); x["name"] == c.tensor.Name {
					x["source_span"] = manifest.HexHash(convert.SpanIdentity(raw, c.tensor.Offset, c.tensor.Offset+c.tensor.Length))
				}
			}
		})
		a, err := pack.Open(out)
		require.NoError(t, err)
		off := a.Manifest().Tensors[slices.IndexFunc(a.Manifest().Tensors, func(e manifest.Tensor) bool { return e.Name == c.tensor.Name })].Section.Offset
		a.Close()
		rep := runAgainst(t, out, changed)
		h, ok := rep.Find(CheckSourceHash, c.tensor.Name)
		require.True(t, ok)
		require.True(t, h.OK, "the rewritten source span holds")
		k, ok := rep.Find(CheckKept, c.tensor.Name)
		require.True(t, ok)
		require.False(t, k.OK)
		require.Equal(t, fmt.Sprintf("kept section at artifact byte %d (its byte %d) is 0x%02x, the source's is 0x%02x",
			off+c.at, c.at, raw[c.tensor.Offset+c.at]^0x10, raw[c.tensor.Offset+c.at]), k.Detail)
	}
}

package diff

import (
	"bytes"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/alloccount"
	"ternkit/pack"
)

// buildWithConfig packs a one-tensor checkpoint with config.json holding
// data.
func buildWithConfig(t *testing.T, dir, name string, data []byte) *pack.Artifact {
	t.Helper()
	src := filepath.Join(dir, name+".safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "blocks.0.norm.weight", DType: "F32", Shape: []int64{2}, Data: make([]byte, 8)},
	}, nil))
	cfg := filepath.Join(dir, name+"-config.json")
	require.NoError(t, os.WriteFile(cfg, data, 0o644))
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	art := filepath.Join(dir, name+pack.Extension)
	_, err = pack.Build(s, art, pack.Options{Codec: pack.Base3, Recipe: convert.DefaultRecipe(), Tool: "ternkit test",
		Companions: []pack.Companion{{Name: "config.json", Path: cfg}}})
	require.NoError(t, err)
	a, err := pack.Open(art)
	require.NoError(t, err)
	t.Cleanup(func() { a.Close() })
	return a
}

// The changed keys of a JSON companion are listed only for files up to
// MaxKeyDiff: a larger one (a tokenizer, say) is reported changed with its
// sizes, without reading both copies into memory and parsing them.
func TestCompanionKeysBounded(t *testing.T) {
	dir := t.TempDir()
	pad := bytes.Repeat([]byte(" "), MaxKeyDiff)
	a := buildWithConfig(t, dir, "a", append([]byte(`{"vocab": {"seed": 1}}`), pad...))
	b := buildWithConfig(t, dir, "b", append([]byte(`{"vocab": {"seed": 2}}`), pad...))
	var got []CompanionChange
	var err error
	allocated := alloccount.Bytes(func() { got, err = compareCompanions(a, b) })
	require.NoError(t, err)
	require.Len(t, got, 1)
	require.Equal(t, CompanionChanged, got[0].Change)
	require.Nil(t, got[0].Keys, "too large to compare key by key")
	require.Less(t, allocated, uint64(MaxKeyDiff), "neither copy is read")

	// a small one still gets its keys
	c := buildWithConfig(t, dir, "c", []byte(`{"vocab": {"seed": 1}}`))
	d := buildWithConfig(t, dir, "d", []byte(`{"vocab": {"seed": 2}}`))
	got, err = compareCompanions(c, d)
	require.NoError(t, err)
	require.Equal(t, []string{"vocab.seed"}, got[0].Keys)
}

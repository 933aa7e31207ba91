package report

import (
	"bytes"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/alloccount"
	"ternkit/modelconfig"
	"ternkit/pack"
)

// A config.json companion over modelconfig.MaxSize gives no architecture
// and is not read: the summary reads the manifest, not the sections.
func TestConfigOverLimitNotRead(t *testing.T) {
	dir := t.TempDir()
	src := filepath.Join(dir, "m.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "blocks.0.norm.weight", DType: "F32", Shape: []int64{2}, Data: make([]byte, 8)},
	}, nil))
	cfg := filepath.Join(dir, "config.json")
	big := append([]byte(`{"hidden_size": 2}`), bytes.Repeat([]byte(" "), 4*modelconfig.MaxSize)...)
	require.NoError(t, os.WriteFile(cfg, big, 0o644))
	art := filepath.Join(dir, "m"+pack.Extension)
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	_, err = pack.Build(s, art, pack.Options{Codec: pack.Base3, Recipe: convert.DefaultRecipe(), Tool: "ternkit test",
		Companions: []pack.Companion{{Name: "config.json", Path: cfg}}})
	require.NoError(t, err)

	var sum *Summary
	allocated := alloccount.Bytes(func() { sum, err = Summarize(art) })
	require.NoError(t, err)
	require.Less(t, allocated, uint64(modelconfig.MaxSize), "the config is not read")
	require.Nil(t, sum.Architecture)
	require.Len(t, sum.Companions, 1)
	require.Equal(t, int64(len(big)), sum.Companions[0].Bytes)
}

package verify

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

// A config.json companion over modelconfig.MaxSize is a warning saying so,
// found from its manifest entry: the check does not read it into memory
// first (it may be as large as a companion may be).
func TestConfigOverLimitNotRead(t *testing.T) {
	dir := t.TempDir()
	src, _ := fixture(t, dir, pack.Base3, nil)
	cfg := filepath.Join(dir, "config.json")
	big := append([]byte(`{"hidden_size": 10}`), bytes.Repeat([]byte(" "), 4*modelconfig.MaxSize)...)
	require.NoError(t, os.WriteFile(cfg, big, 0o644))
	art := filepath.Join(dir, "big.tkart")
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	_, err = pack.Build(s, art, pack.Options{Codec: pack.Base3, Recipe: convert.DefaultRecipe(), Tool: "ternkit test",
		Companions: []pack.Companion{{Name: "config.json", Path: cfg}}})
	require.NoError(t, err)
	a, err := pack.Open(art)
	require.NoError(t, err)
	defer a.Close()

	rep := &Report{}
	allocated := alloccount.Bytes(func() { checkConfig(rep, a) })
	require.Less(t, allocated, uint64(modelconfig.MaxSize), "the config is not read")
	require.Len(t, rep.Warnings, 1)
	require.Contains(t, rep.Warnings[0], "config.json")
	require.Contains(t, rep.Warnings[0], "above the 1048576-byte limit")
}

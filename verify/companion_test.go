package verify

import (
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/pack"
)

// companionFixture packs the fixture's source with a config and a licence
// beside it.
func companionFixture(t *testing.T) (dir, src, art string) {
	dir = t.TempDir()
	src, _ = fixture(t, dir, pack.Base3, nil)
	require.NoError(t, os.WriteFile(filepath.Join(dir, "config.json"), []byte(`{"hidden_size": 10}`), 0o644))
	require.NoError(t, os.WriteFile(filepath.Join(dir, "LICENSE"), []byte("Fernmoss Seed Vault: internal use.\n"), 0o644))
	cs, err := pack.FindCompanions(dir, pack.DefaultCompanionGlobs)
	require.NoError(t, err)
	require.Len(t, cs, 2)
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	art = filepath.Join(dir, "c.tkart")
	_, err = pack.Build(s, art, pack.Options{Codec: pack.Base3, Recipe: convert.DefaultRecipe(), Companions: cs})
	require.NoError(t, err)
	return dir, src, art
}

func TestVerifyCompanions(t *testing.T) {
	dir, src, art := companionFixture(t)
	rep := runAgainst(t, art, src)
	require.True(t, rep.OK(), "%+v", rep.Failures())
	for _, name := range []string{"config.json", "LICENSE"} {
		c, ok := rep.Find(CheckSection, CompanionPrefix+name)
		require.True(t, ok && c.OK, name)
		c, ok = rep.Find(CheckCompanionFile, CompanionPrefix+name)
		require.True(t, ok && c.OK, name)
	}

	// changed, missing and extra files each fail, naming the file
	require.NoError(t, os.WriteFile(filepath.Join(dir, "config.json"), []byte(`{"hidden_size": 12}`), 0o644))
	require.NoError(t, os.Remove(filepath.Join(dir, "LICENSE")))
	require.NoError(t, os.WriteFile(filepath.Join(dir, "tokenizer.json"), []byte(`{}`), 0o644))
	rep = runAgainst(t, art, src)
	require.False(t, rep.OK())
	var got []string
	for _, c := range rep.Failures() {
		require.Equal(t, CheckCompanionFile, c.Name)
		got = append(got, c.Tensor+": "+c.Detail[:min(len(c.Detail), 7)])
	}
	require.Equal(t, []string{"companion:LICENSE: missing", "companion:config.json: changed", "companion:tokenizer.json: extra: "}, got)

	// a companion section's byte changed in the artifact: its hash check fails
	b, err := os.ReadFile(art)
	require.NoError(t, err)
	a, err := pack.Open(art)
	require.NoError(t, err)
	off := a.Companions()[0].Section.Offset
	a.Close()
	b[off] ^= 1
	require.NoError(t, os.WriteFile(art, b, 0o644))
	rep, err = Run(art, Options{})
	require.NoError(t, err)
	c, ok := rep.Find(CheckSection, CompanionPrefix+"LICENSE")
	require.True(t, ok)
	require.False(t, c.OK, "the first companion, by name order, is LICENSE")
}

package pack

import (
	"errors"
	"os"
	"path/filepath"
	"syscall"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
)

// buildCompanions packs src with the given companions into dir/out.tkart.
func buildCompanions(t *testing.T, src, dst string, cs []Companion) error {
	t.Helper()
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	_, err = Build(s, dst, Options{Codec: Base3, Recipe: stridedRecipe(), Tool: "ternkit test", Companions: cs})
	return err
}

func TestCompanionsRoundTrip(t *testing.T) {
	dir := t.TempDir()
	src, _ := testSource(t, dir)
	config := []byte(`{"hidden_size": 16, "num_hidden_layers": 1}`)
	licence := []byte("Fernmoss Seed Vault scanner weights: internal use.\n")
	require.NoError(t, os.WriteFile(filepath.Join(dir, "config.json"), config, 0o644))
	require.NoError(t, os.WriteFile(filepath.Join(dir, "LICENSE"), licence, 0o644))
	require.NoError(t, os.WriteFile(filepath.Join(dir, "empty.txt"), nil, 0o644))
	require.NoError(t, os.WriteFile(filepath.Join(dir, "report.html"), []byte("<p>"), 0o644))

	found, err := FindCompanions(dir, append(DefaultCompanionGlobs, "empty.txt"))
	require.NoError(t, err)
	require.Equal(t, []Companion{
		{Name: "LICENSE", Path: filepath.Join(dir, "LICENSE")},
		{Name: "config.json", Path: filepath.Join(dir, "config.json")},
		{Name: "empty.txt", Path: filepath.Join(dir, "empty.txt")},
	}, found, "sorted by name; the HTML report is not a companion")

	dst := filepath.Join(dir, "out"+Extension)
	require.NoError(t, buildCompanions(t, src, dst, found))
	a, err := Open(dst)
	require.NoError(t, err)
	defer a.Close()
	require.NoError(t, a.Check())
	_, minor := a.Version()
	require.Equal(t, 4, minor, "new artifacts are format 1.4")
	require.Len(t, a.Companions(), 3)
	for name, want := range map[string][]byte{"config.json": config, "LICENSE": licence, "empty.txt": {}} {
		got, err := a.Companion(name)
		require.NoError(t, err)
		require.Equal(t, want, got, name)
	}
	_, err = a.Companion("tokenizer.json")
	require.ErrorIs(t, err, ErrNoCompanion)

	// without companions the same source gives format 1.4 too
	plain := filepath.Join(dir, "plain"+Extension)
	require.NoError(t, buildCompanions(t, src, plain, nil))
	b, err := Open(plain)
	require.NoError(t, err)
	defer b.Close()
	_, minor = b.Version()
	require.Equal(t, 4, minor)
	require.Empty(t, b.Companions())

	// a changed byte in a companion's section is a hash failure
	raw, err := os.ReadFile(dst)
	require.NoError(t, err)
	raw[a.Companions()[1].Section.Offset] ^= 1
	bad := filepath.Join(dir, "bad"+Extension)
	require.NoError(t, os.WriteFile(bad, raw, 0o644))
	c, err := Open(bad)
	require.NoError(t, err)
	defer c.Close()
	require.ErrorIs(t, c.Check(), ErrHash)
	_, err = c.Companion("config.json")
	require.ErrorIs(t, err, ErrHash)
}

// Build refuses a companion it cannot carry before it writes anything.
func TestCompanionsRefused(t *testing.T) {
	dir := t.TempDir()
	src, _ := testSource(t, dir)
	outside := t.TempDir()
	require.NoError(t, os.WriteFile(filepath.Join(outside, "secret.txt"), []byte("x"), 0o644))
	require.NoError(t, os.WriteFile(filepath.Join(dir, "inside.txt"), []byte("y"), 0o644))
	require.NoError(t, os.Symlink(filepath.Join(outside, "secret.txt"), filepath.Join(dir, "LICENSE")))
	require.NoError(t, os.Symlink("inside.txt", filepath.Join(dir, "README.md")))
	require.NoError(t, os.Mkdir(filepath.Join(dir, "vocab.json"), 0o755))
	require.NoError(t, syscall.Mkfifo(filepath.Join(dir, "merges.txt"), 0o644))
	big := filepath.Join(dir, "tokenizer.json")
	require.NoError(t, os.WriteFile(big, nil, 0o644))
	require.NoError(t, os.Truncate(big, MaxCompanionSize+1)) // sparse: no disk used

	for _, tc := range []struct {
		c    Companion
		want string
	}{
		{Companion{"LICENSE", filepath.Join(dir, "LICENSE")}, "outside its directory"},
		{Companion{"vocab.json", filepath.Join(dir, "vocab.json")}, "not a regular file"},
		{Companion{"merges.txt", filepath.Join(dir, "merges.txt")}, "not a regular file"},
		{Companion{"tokenizer.json", big}, "over the 268435456-byte limit"},
		{Companion{"../inside.txt", filepath.Join(dir, "inside.txt")}, "path separator"},
		{Companion{"..", filepath.Join(dir, "inside.txt")}, "not a file name"},
		{Companion{"a\tb", filepath.Join(dir, "inside.txt")}, "control character U+0009"},
	} {
		dst := filepath.Join(dir, "out"+Extension)
		err := buildCompanions(t, src, dst, []Companion{tc.c})
		require.ErrorIs(t, err, ErrCompanion, tc.c.Name)
		require.ErrorContains(t, err, tc.want)
		_, statErr := os.Stat(dst)
		require.True(t, errors.Is(statErr, os.ErrNotExist), "nothing written for %s", tc.c.Name)
	}
	// two names that are one file on a case-insensitive file system
	err := buildCompanions(t, src, filepath.Join(dir, "out"+Extension), []Companion{
		{"inside.txt", filepath.Join(dir, "inside.txt")}, {"Inside.txt", filepath.Join(dir, "inside.txt")}})
	require.ErrorIs(t, err, ErrCompanion)
	// a symbolic link within the directory is followed
	require.NoError(t, buildCompanions(t, src, filepath.Join(dir, "ok"+Extension), []Companion{{"README.md", filepath.Join(dir, "README.md")}}))
}

package pack

import (
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"
)

// companionArtifact packs the test source with a config.json companion.
func companionArtifact(t *testing.T, dir string) *Artifact {
	t.Helper()
	src, _ := testSource(t, dir)
	cfg := filepath.Join(dir, "config.json")
	require.NoError(t, os.WriteFile(cfg, []byte(`{"hidden_size": 16}`), 0o644))
	dst := filepath.Join(dir, "out"+Extension)
	require.NoError(t, buildCompanions(t, src, dst, []Companion{{Name: "config.json", Path: cfg}}))
	a, err := Open(dst)
	require.NoError(t, err)
	t.Cleanup(func() { a.Close() })
	return a
}

// An existing empty directory is a valid destination (README: "DIR must
// not exist or be empty"), and so is a symbolic link to one: the files
// appear in the directory it leads to, and the link stays.
func TestUnpackDirIntoEmptyDirectory(t *testing.T) {
	dir := t.TempDir()
	a := companionArtifact(t, dir)

	empty := filepath.Join(dir, "empty")
	require.NoError(t, os.Mkdir(empty, 0o755))
	before, err := os.Stat(empty)
	require.NoError(t, err)
	require.NoError(t, UnpackDir(a, empty, "F32", 0))
	requireUnpacked(t, empty)
	after, err := os.Stat(empty)
	require.NoError(t, err)
	require.True(t, os.SameFile(before, after), "the directory itself is kept, not replaced")

	// the working directory, as "."
	cwd := filepath.Join(dir, "cwd")
	require.NoError(t, os.Mkdir(cwd, 0o755))
	t.Chdir(cwd)
	require.NoError(t, UnpackDir(a, ".", "F32", 0))
	requireUnpacked(t, cwd)

	target := filepath.Join(dir, "target")
	require.NoError(t, os.Mkdir(target, 0o755))
	link := filepath.Join(dir, "link")
	require.NoError(t, os.Symlink("target", link))
	require.NoError(t, UnpackDir(a, link, "F32", 0))
	st, err := os.Lstat(link)
	require.NoError(t, err)
	require.NotZero(t, st.Mode()&os.ModeSymlink, "the link is kept")
	requireUnpacked(t, target)

	// a directory that holds a file is still refused, and left alone
	full := filepath.Join(dir, "full")
	require.NoError(t, os.Mkdir(full, 0o755))
	require.NoError(t, os.WriteFile(filepath.Join(full, "keep"), []byte("x"), 0o644))
	require.ErrorIs(t, UnpackDir(a, full, "F32", 0), ErrDirNotEmpty)
	entries, err := os.ReadDir(full)
	require.NoError(t, err)
	require.Len(t, entries, 1)
}

func requireUnpacked(t *testing.T, dir string) {
	t.Helper()
	entries, err := os.ReadDir(dir)
	require.NoError(t, err)
	var names []string
	for _, e := range entries {
		names = append(names, e.Name())
	}
	require.Equal(t, []string{"config.json", UnpackedWeights}, names)
	got, err := os.ReadFile(filepath.Join(dir, "config.json"))
	require.NoError(t, err)
	require.Equal(t, `{"hidden_size": 16}`, string(got))
}

// A companion whose name is a weights file's in another ASCII case would
// replace the weights on a file system that ignores case: refused.
func TestUnpackDirRefusesCompanionNamedLikeWeightsInAnyCase(t *testing.T) {
	dir := t.TempDir()
	src, _ := testSource(t, dir)
	other := filepath.Join(dir, "MODEL.SAFETENSORS")
	require.NoError(t, os.WriteFile(other, []byte("not weights"), 0o644))
	art := filepath.Join(dir, "out"+Extension)
	require.NoError(t, buildCompanions(t, src, art, []Companion{{Name: "MODEL.SAFETENSORS", Path: other}}))
	a, err := Open(art)
	require.NoError(t, err)
	defer a.Close()
	dst := filepath.Join(dir, "unpacked")
	err = UnpackDir(a, dst, "F32", 0)
	require.ErrorIs(t, err, ErrCompanion)
	require.Contains(t, err.Error(), "MODEL.SAFETENSORS")
	_, err = os.Stat(dst)
	require.ErrorIs(t, err, os.ErrNotExist, "nothing written")
}

// A file that appears in the destination while it is filled stops the
// move, and the files moved so far are taken out again.
func TestMoveOutStopsOnTakenName(t *testing.T) {
	dir := t.TempDir()
	tmp := filepath.Join(dir, ".unpack.tmp-x")
	require.NoError(t, os.Mkdir(tmp, 0o755))
	for _, name := range []string{"config.json", UnpackedWeights} {
		require.NoError(t, os.WriteFile(filepath.Join(tmp, name), []byte(name), 0o644))
	}
	require.NoError(t, os.WriteFile(filepath.Join(dir, UnpackedWeights), []byte("someone else's"), 0o644))
	err := moveOut(tmp, dir, map[string]bool{UnpackedWeights: true})
	require.ErrorIs(t, err, ErrDirNotEmpty)
	_, err = os.Stat(filepath.Join(dir, "config.json"))
	require.ErrorIs(t, err, os.ErrNotExist, "the companion moved first is removed again")
	got, err := os.ReadFile(filepath.Join(dir, UnpackedWeights))
	require.NoError(t, err)
	require.Equal(t, "someone else's", string(got), "the other file is left alone")
}

// A companion named like weights or an index of any name would make the
// unpacked directory ambiguous to a loader (a directory is read through
// its one index, or its one weights file): refused, nothing written.
func TestUnpackDirRefusesCompanionNamedLikeWeightsOrIndex(t *testing.T) {
	for _, name := range []string{"model.safetensors.index.json", "draft.safetensors", "Adapter.SafeTensors"} {
		t.Run(name, func(t *testing.T) {
			dir := t.TempDir()
			src, _ := testSource(t, dir)
			other := filepath.Join(dir, "other")
			require.NoError(t, os.WriteFile(other, []byte("{}"), 0o644))
			art := filepath.Join(dir, "out"+Extension)
			require.NoError(t, buildCompanions(t, src, art, []Companion{{Name: name, Path: other}}))
			a, err := Open(art)
			require.NoError(t, err)
			defer a.Close()
			dst := filepath.Join(dir, "unpacked")
			err = UnpackDir(a, dst, "F32", 0)
			require.ErrorIs(t, err, ErrCompanion)
			require.Contains(t, err.Error(), name)
			_, err = os.Stat(dst)
			require.ErrorIs(t, err, os.ErrNotExist, "nothing written")
		})
	}
}

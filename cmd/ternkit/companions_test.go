package main

import (
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/pack"
)

func companionNames(t *testing.T, art string) []string {
	t.Helper()
	a, err := pack.Open(art)
	require.NoError(t, err)
	defer a.Close()
	var names []string
	for _, c := range a.Companions() {
		names = append(names, c.Name)
	}
	return names
}

// pack carries the default companions of the checkpoint's directory, not
// ternkit's own outputs there; --companion adds, --no-companions drops.
func TestPackCompanions(t *testing.T) {
	dir := t.TempDir()
	src, art := demoArtifact(t, dir)
	require.Equal(t, []string{"config.json", demoVocabFile}, companionNames(t, art),
		"the demo's artifact, report and policy file lie in the same directory and are not companions")

	require.NoError(t, os.WriteFile(filepath.Join(dir, "scanner-notes.txt"), []byte("drawer 12 sticks\n"), 0o644))
	out := filepath.Join(t.TempDir(), "extra.tkart")
	code, stdout, stderr := ternkit("pack", src, "-o", out, "--companion", "*-notes.txt", "--quiet")
	require.Equal(t, exitOK, code, stdout+stderr)
	require.Equal(t, []string{"config.json", "scanner-notes.txt", demoVocabFile}, companionNames(t, out))

	none := filepath.Join(t.TempDir(), "none.tkart")
	code, stdout, stderr = ternkit("pack", src, "-o", none, "--no-companions", "--quiet")
	require.Equal(t, exitOK, code, stdout+stderr)
	require.Empty(t, companionNames(t, none))
	b, err := os.ReadFile(none)
	require.NoError(t, err)
	require.Equal(t, byte(4), b[10], "new artifacts are format 1.4, companions or not")

	code, _, stderr = ternkit("pack", src, "-o", none, "--companion", "sub/*.txt")
	require.Equal(t, exitInput, code)
	require.Contains(t, stderr, "base-name pattern")
}

// A companion pack cannot carry is refused with exit 2, naming the file,
// and nothing is written.
func TestPackCompanionRefused(t *testing.T) {
	dir := t.TempDir()
	src, _ := demoArtifact(t, dir)
	outside := filepath.Join(t.TempDir(), "LICENSE")
	require.NoError(t, os.WriteFile(outside, []byte("elsewhere\n"), 0o644))
	require.NoError(t, os.Symlink(outside, filepath.Join(dir, "LICENSE")))
	out := filepath.Join(t.TempDir(), "refused.tkart")
	code, _, stderr := ternkit("pack", src, "-o", out)
	require.Equal(t, exitInput, code)
	require.Contains(t, stderr, filepath.Join(dir, "LICENSE"))
	require.Contains(t, stderr, "outside its directory")
	require.NoFileExists(t, out)
	entries, err := os.ReadDir(filepath.Dir(out))
	require.NoError(t, err)
	require.Empty(t, entries, "no temporary file left behind")

	code, stdout, stderr := ternkit("pack", src, "-o", out, "--no-companions", "--quiet")
	require.Equal(t, exitOK, code, stdout+stderr)
}

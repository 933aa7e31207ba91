package main

import (
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"
)

// demo --dir into a directory holding someone's own config.json or
// vocabulary refuses before writing anything, rather than replace them; a
// directory an earlier demo run filled is fine.
func TestDemoKeepsOthersCompanionFiles(t *testing.T) {
	for _, name := range []string{"config.json", demoVocabFile} {
		t.Run(name, func(t *testing.T) {
			dir := t.TempDir()
			mine := []byte(`{"hidden_size": 4096}`)
			require.NoError(t, os.WriteFile(filepath.Join(dir, name), mine, 0o644))
			code, _, errOut := ternkit("demo", "--dir", dir, "-q")
			require.Equal(t, exitInput, code, errOut)
			require.Contains(t, errOut, filepath.Join(dir, name))
			got, err := os.ReadFile(filepath.Join(dir, name))
			require.NoError(t, err)
			require.Equal(t, mine, got, "left as it was")
			entries, err := os.ReadDir(dir)
			require.NoError(t, err)
			require.Len(t, entries, 1, "nothing written")
		})
	}
	dir := t.TempDir()
	demoArtifact(t, dir)
	demoArtifact(t, dir) // the demo's own files from the first run
}

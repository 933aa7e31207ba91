package main

import (
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"
)

// A --companion pattern that selects no file (a typo, or only the weights)
// is a warning naming it, as a policy rule matching no tensor is; the
// artifact is still written.
func TestPackWarnsCompanionPatternMatchingNothing(t *testing.T) {
	dir := t.TempDir()
	src, _ := demoArtifact(t, dir)
	out := filepath.Join(t.TempDir(), "typo.tkart")
	code, stdout, stderr := ternkit("pack", src, "-o", out, "--companion", "tokenizer.jsn", "--companion", "*.safetensors", "--companion", "vocab.*")
	require.Equal(t, exitOK, code, stdout+stderr)
	require.Contains(t, stderr, `warning: --companion "tokenizer.jsn" selects no companion file in `+dir)
	require.Contains(t, stderr, `warning: --companion "*.safetensors" selects no companion file in `+dir)
	require.NotContains(t, stderr, `"vocab.*"`, "a pattern that selects a companion gets no warning")
	require.Equal(t, []string{"config.json", demoVocabFile}, companionNames(t, out))

	// --strict: a mistyped pattern stops pack before anything is written
	strict := filepath.Join(t.TempDir(), "strict.tkart")
	code, _, stderr = ternkit("pack", src, "-o", strict, "--companion", "tokenizer.jsn", "--strict")
	require.Equal(t, exitInput, code)
	require.Contains(t, stderr, `--companion "tokenizer.jsn" selects no companion file`)
	require.NoFileExists(t, strict)
}

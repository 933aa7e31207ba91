package main

import (
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"
)

// unpack -o FILE.safetensors writes the weights alone: when the artifact
// carries companions (the demo's config and vocabulary), a note on stderr
// names them and the form that writes them, so that an evaluation run
// does not go without its config unnoticed.
func TestUnpackFileNotesCompanionsLeftOut(t *testing.T) {
	dir := t.TempDir()
	_, art := demoArtifact(t, dir)
	code, stdout, errOut := ternkit("unpack", art, "-o", filepath.Join(dir, "w.safetensors"))
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, errOut, "note: 2 companion files not written (config.json, vocab.json): unpack -o DIR writes them beside the weights")
	require.NotContains(t, stdout, "note:")

	plain := filepath.Join(t.TempDir(), "plain.tkart")
	code, _, errOut = ternkit("pack", filepath.Join(dir, demoModel+".safetensors"), "-o", plain, "--no-companions", "-q")
	require.Equal(t, exitOK, code, errOut)
	code, _, errOut = ternkit("unpack", plain, "-o", filepath.Join(dir, "p.safetensors"))
	require.Equal(t, exitOK, code, errOut)
	require.NotContains(t, errOut, "note:")
}

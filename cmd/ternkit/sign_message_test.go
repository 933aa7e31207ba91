package main

import (
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"
)

// sign --print-message on an artifact that fails verification writes
// nothing to stdout, which the documented command redirects into the
// message file, and says why on stderr, where the user sees it.
func TestPrintMessageFailureGoesToStderr(t *testing.T) {
	dir := t.TempDir()
	_, art := demoArtifact(t, dir)
	b := readFile(t, art)
	b[len(b)/3] ^= 0x10
	bad := filepath.Join(dir, "bad.tkart")
	require.NoError(t, os.WriteFile(bad, b, 0o644))

	code, out, errOut := ternkit("sign", bad, "--print-message")
	require.Equal(t, exitFailed, code)
	require.Empty(t, out, "no report text in the message file")
	require.Contains(t, errOut, "verify: FAILED")
	require.Contains(t, errOut, "refusing to sign "+bad)

	code, out, _ = ternkit("sign", art, "--print-message")
	require.Equal(t, exitOK, code)
	require.Len(t, out, 52, "the message alone")
}

package main

import (
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"
)

// The command line's exit codes on test vectors of pack/FORMAT.md: 0 for a
// valid artifact, 1 for one whose trit counts differ from its decoded
// payload (bad-counts.tkart: every hash holds, only counting the trits
// catches it) and for one whose section hash is wrong.
func TestVerifyVectorsExitCodes(t *testing.T) {
	dir := filepath.Join("..", "..", "testdata", "vectors")
	cases := []struct {
		file string
		code int
		want string
	}{
		{"ok-bits2.tkart", exitOK, ""},
		{"bad-counts.tkart", exitFailed, "trit counts {Neg:4 Zero:5 Pos:5}, manifest records {Neg:4 Zero:4 Pos:6}"},
		{"bad-section-hash.tkart", exitFailed, "BLAKE3"},
	}
	for _, c := range cases {
		code, out, errOut := ternkit("verify", filepath.Join(dir, c.file))
		require.Equal(t, c.code, code, "%s: %s%s", c.file, out, errOut)
		require.Contains(t, out, c.want, c.file)
	}
}

package asmcheck

import (
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"
)

// The project's assembly uses VEX moves only.
func TestProjectAssembly(t *testing.T) {
	for _, dir := range []string{"../../convert", "../../pack", "../treehash"} {
		found, err := LegacySSEMoves(dir)
		require.NoError(t, err)
		require.Empty(t, found, "legacy SSE moves in AVX code: use VMOVD/VMOVQ")
	}
}

// The check finds a legacy move alone and inside a macro line, and passes
// the VEX forms, moves between general registers and comments.
func TestFindsLegacyMoves(t *testing.T) {
	dir := t.TempDir()
	src := "TEXT ·f(SB), 0, $0\n" +
		"\tMOVQ X9, (DI)\n" +
		"\tVMOVQ X9, (DI)\n" +
		"\tMOVQ AX, BX // X1 in a comment\n" +
		"\tVPAND Y1, Y2, Y3; \\\n" +
		"\tMOVL AX, X15; \\\n" +
		"\tVMOVD AX, X15\n"
	require.NoError(t, os.WriteFile(filepath.Join(dir, "k.s"), []byte(src), 0o644))
	found, err := LegacySSEMoves(dir)
	require.NoError(t, err)
	require.Equal(t, []string{"k.s:2: MOVQ X9, (DI)", "k.s:6: MOVL AX, X15"}, found)
}

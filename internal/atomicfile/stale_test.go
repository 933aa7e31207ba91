package atomicfile

import (
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
)

// deadPID returns the PID of a process that has exited.
func deadPID(t *testing.T) int {
	t.Helper()
	cmd := exec.Command(os.Args[0], "-test.run=^$")
	require.NoError(t, cmd.Run())
	return cmd.Process.Pid
}

// The temporary file carries the writer's PID, so that a later writer can
// tell a killed writer's leftovers from a running one's.
func TestCreateNamesTempWithPID(t *testing.T) {
	dir := t.TempDir()
	f, err := Create(filepath.Join(dir, "out"), 0o644)
	require.NoError(t, err)
	defer f.Abort()
	entries, err := os.ReadDir(dir)
	require.NoError(t, err)
	require.Len(t, entries, 1)
	require.True(t, strings.HasPrefix(entries[0].Name(), ".out.tmp-"+strconv.Itoa(os.Getpid())+"-"), entries[0].Name())
}

func TestRemoveStale(t *testing.T) {
	dead := deadPID(t)
	tests := []struct {
		name string
		kept bool
	}{
		{fmt.Sprintf(".out.tmp-%d-123", dead), false},                           // its writer is gone
		{fmt.Sprintf(".out.tmp-%d-123", os.Getpid()), true},                     // this process writes it
		{fmt.Sprintf(".out.tmp-%d-123", os.Getppid()), true},                    // a running process writes it
		{fmt.Sprintf(".other.tmp-%d-123", dead), true},                          // another destination's
		{".out.tmp-123456", true},                                               // no PID field: not ours to judge
		{".out.tmp-abc-1", true},                                                // not a PID
		{"out", true},                                                           // the destination itself
		{fmt.Sprintf(".out.tmp-%d-dir", dead) + string(os.PathSeparator), true}, // a directory
	}
	dir := t.TempDir()
	for _, tc := range tests {
		p := filepath.Join(dir, tc.name)
		if strings.HasSuffix(tc.name, string(os.PathSeparator)) {
			require.NoError(t, os.Mkdir(p, 0o755))
			continue
		}
		require.NoError(t, os.WriteFile(p, []byte("x"), 0o644))
	}
	removed := RemoveStale(filepath.Join(dir, "out"))
	require.Equal(t, []string{fmt.Sprintf(".out.tmp-%d-123", dead)}, removed)
	for _, tc := range tests {
		_, err := os.Stat(filepath.Join(dir, tc.name))
		require.Equal(t, tc.kept, err == nil, tc.name)
	}
}

// Create cleans up after a killed writer of the same destination.
func TestCreateRemovesStale(t *testing.T) {
	dir := t.TempDir()
	stale := filepath.Join(dir, fmt.Sprintf(".out.tmp-%d-1", deadPID(t)))
	require.NoError(t, os.WriteFile(stale, []byte("half"), 0o644))
	require.NoError(t, WriteFile(filepath.Join(dir, "out"), []byte("whole"), 0o644))
	onlyEntries(t, dir, "out")
}

//go:build unix

package pack

import (
	"path/filepath"
	"syscall"
	"testing"
	"time"

	"github.com/stretchr/testify/require"
)

// A companion that becomes a FIFO after CheckCompanion passed it (swapped
// in between the check and the copy) is refused when it is opened, not
// waited on forever: the copy opens without blocking and checks what it
// opened.
func TestWriteCompanionFIFORefusedWithoutWaiting(t *testing.T) {
	dir := t.TempDir()
	fifo := filepath.Join(dir, "config.json")
	require.NoError(t, syscall.Mkfifo(fifo, 0o600))
	w, err := createAtomic(filepath.Join(dir, "out"+Extension))
	require.NoError(t, err)
	defer w.abort()
	done := make(chan error, 1)
	go func() {
		_, err := w.writeCompanion(Companion{Name: "config.json", Path: fifo})
		done <- err
	}()
	select {
	case err := <-done:
		require.ErrorIs(t, err, ErrCompanion)
		require.ErrorContains(t, err, "not a regular file")
	case <-time.After(5 * time.Second):
		t.Fatal("writeCompanion waits on a FIFO")
	}
}

//go:build unix

package sign

import (
	"path/filepath"
	"syscall"
	"testing"

	"github.com/stretchr/testify/require"
)

// A FIFO where a key or signature file belongs is refused before it is
// opened (opening one for reading would wait for a writer forever).
func TestFIFORefused(t *testing.T) {
	dir := t.TempDir()
	fifo := filepath.Join(dir, "a.tkart.sig")
	require.NoError(t, syscall.Mkfifo(fifo, 0o600))
	_, err := ReadSignatureFile(fifo)
	require.ErrorIs(t, err, ErrFormat)
	require.Contains(t, err.Error(), "not a regular file")
	_, err = ReadPublicKeyFile(fifo)
	require.ErrorContains(t, err, "not a regular file")
	_, err = ReadPrivateKeyFile(fifo)
	require.ErrorContains(t, err, "not a regular file")
}

package pack

import (
	"bytes"
	"errors"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"
)

// The manifest limit is checked from the trailer: at the manifest's length
// the artifact opens, one byte below it Open and NewReader refuse it with a
// *FormatError naming the trailer's length field.
func TestMaxManifest(t *testing.T) {
	dir := t.TempDir()
	src, _ := testSource(t, dir)
	art := filepath.Join(dir, "a"+Extension)
	buildArtifact(t, src, art, Bits2)
	a, err := Open(art)
	require.NoError(t, err)
	n := a.Size() - TrailerLen - a.ManifestOffset()
	a.Close()
	b, err := os.ReadFile(art)
	require.NoError(t, err)

	tests := []struct {
		name string
		opts []ReadOption
		ok   bool
	}{
		{"default", nil, true},
		{"at the length", []ReadOption{MaxManifest(n)}, true},
		{"zero keeps the default", []ReadOption{MaxManifest(0)}, true},
		{"below the length", []ReadOption{MaxManifest(n - 1)}, false},
		{"the last option wins", []ReadOption{MaxManifest(n - 1), MaxManifest(n)}, true},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			a, err := Open(art, tc.opts...)
			_, rerr := NewReader(bytes.NewReader(b), int64(len(b)), tc.opts...)
			if tc.ok {
				require.NoError(t, err)
				require.NoError(t, rerr)
				a.Close()
				return
			}
			for _, err := range []error{err, rerr} {
				require.ErrorIs(t, err, ErrStructure)
				var fe *FormatError
				require.True(t, errors.As(err, &fe))
				require.Equal(t, "trailer", fe.Where)
				require.Equal(t, int64(len(b))-TrailerLen+8, fe.Offset, "the manifest length field")
				require.Contains(t, err.Error(), "over the limit")
			}
		})
	}
}

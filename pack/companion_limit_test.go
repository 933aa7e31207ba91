package pack

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
	"github.com/zeebo/blake3"

	"ternkit/internal/alloccount"
	"ternkit/manifest"
)

// hugeCompanionArtifact rewrites the artifact at src, whose last section
// is the companion name, so that this companion claims n bytes: a sparse
// hole (cheap on disk), then a consistent manifest and trailer. Its bytes
// do not match the recorded hash: only a read that allocates first sees it.
func hugeCompanionArtifact(t *testing.T, src, dst, name string, n int64) {
	t.Helper()
	a, err := Open(src)
	require.NoError(t, err)
	m := a.Manifest()
	a.Close()
	c := m.Companion(name)
	require.NotNil(t, c)
	require.Equal(t, &m.Companions[len(m.Companions)-1], c, "the companion is the last section")
	c.Section.Length = n
	c.Section.PieceCVs = make([]string, manifest.NumChunks(n))
	for i := range c.Section.PieceCVs {
		c.Section.PieceCVs[i] = strings.Repeat("00", 32)
	}
	body, err := manifest.Encode(m)
	require.NoError(t, err)
	raw, err := os.ReadFile(src)
	require.NoError(t, err)
	f, err := os.Create(dst)
	require.NoError(t, err)
	defer f.Close()
	_, err = f.Write(raw[:c.Section.Offset])
	require.NoError(t, err)
	off := alignUp(c.Section.Offset + n)
	tr := trailer{manifestOffset: off, manifestLen: int64(len(body)), manifestHash: blake3.Sum256(body)}
	_, err = f.WriteAt(append(body, tr.encode()...), off)
	require.NoError(t, err)
}

// A companion section larger than MaxCompanionSize (which Build never
// writes; the format bounds a section only by the file) is refused by
// Companion before it allocates: a sparse file must not make a reader
// allocate what the manifest claims.
func TestCompanionOverLimitRefusedBeforeAllocating(t *testing.T) {
	dir := t.TempDir()
	companionArtifact(t, dir)
	huge := filepath.Join(dir, "huge"+Extension)
	hugeCompanionArtifact(t, filepath.Join(dir, "out"+Extension), huge, "config.json", MaxCompanionSize+1)

	a, err := Open(huge)
	require.NoError(t, err, "the layout is valid")
	defer a.Close()
	var cerr error
	allocated := alloccount.Bytes(func() { _, cerr = a.Companion("config.json") })
	require.ErrorIs(t, cerr, ErrCompanion)
	require.Contains(t, cerr.Error(), "config.json")
	require.Less(t, allocated, uint64(1<<20), "refused before reading")
}

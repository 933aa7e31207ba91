package pack

import (
	"bytes"
	"encoding/binary"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/testweights"
	"ternkit/manifest"
)

// autoSource writes a checkpoint with one Gaussian and one sparse weight
// matrix (60% of the weights exactly 0, so 60% zero trits at least).
func autoSource(t *testing.T, dir string) string {
	t.Helper()
	gauss := testweights.Gaussian(newTestRand(21), 64*80)
	sparse := testweights.Gaussian(newTestRand(22), 64*80)
	for i, tr := range sparseTrits(23, len(sparse), 0.6) {
		if tr == 0 {
			sparse[i] = 0
		}
	}
	path := filepath.Join(dir, "auto.safetensors")
	require.NoError(t, convert.WriteFile(path, []convert.WriteTensor{
		{Name: "blocks.0.dense.weight", DType: "F32", Shape: []int64{64, 80}, Data: testweights.F32Bytes(gauss)},
		{Name: "blocks.0.sparse.weight", DType: "F32", Shape: []int64{64, 80}, Data: testweights.F32Bytes(sparse)},
	}, nil))
	return path
}

func TestBuildAutoAndMinorVersion(t *testing.T) {
	dir := t.TempDir()
	src := autoSource(t, dir)
	cases := []struct {
		codec  Codec
		stored []string // per tensor
		minor  int
	}{
		// new artifacts are 1.4 whatever they use (FORMAT.md, "Versioning")
		{Auto, []string{"base3", "entropy"}, 4},
		{Base3, []string{"base3", "base3"}, 4},
		{Bits2, []string{"bits2", "bits2"}, 4},
		{Entropy, []string{"entropy", "entropy"}, 4},
	}
	for _, c := range cases {
		t.Run(string(c.codec), func(t *testing.T) {
			dst := filepath.Join(dir, string(c.codec)+Extension)
			// the recipe without the sum key, whose minor version is 2
			s, err := convert.Open(src)
			require.NoError(t, err)
			defer s.Close()
			m, err := Build(s, dst, Options{Codec: c.codec, Recipe: sequentialRecipe(), Tool: "ternkit test"})
			require.NoError(t, err)
			for i, e := range m.Tensors {
				require.Equal(t, c.stored[i], e.Codec, e.Name)
			}
			a, err := Open(dst)
			require.NoError(t, err)
			defer a.Close()
			major, minor := a.Version()
			require.Equal(t, 1, major)
			require.Equal(t, c.minor, minor)
			for _, e := range a.Tensors() {
				tn, err := a.Tensor(e.Name)
				require.NoError(t, err)
				require.NoError(t, tn.DecodeTrits(make([]int8, tn.Len())))
			}

			// Any other minor version is rejected: below 1.4 the manifest's
			// minor key is too new, above it the version is unknown.
			b, err := os.ReadFile(dst)
			require.NoError(t, err)
			for _, other := range []uint16{0, 1, 2, 3, 5} {
				if int(other) == c.minor {
					continue
				}
				bad := bytes.Clone(b)
				binary.LittleEndian.PutUint16(bad[10:], other)
				_, err := NewReader(bytes.NewReader(bad), int64(len(bad)))
				require.Error(t, err, "minor %d", other)
				require.ErrorIs(t, err, ErrVersion, "minor %d", other)
			}
		})
	}
}

func TestMinorVersionFor(t *testing.T) {
	m := &manifest.Manifest{}
	require.Equal(t, uint16(0), minorVersionFor(m))
	m.Tensors = []manifest.Tensor{{Codec: manifest.CodecRaw}, {Codec: manifest.CodecBits2}}
	require.Equal(t, uint16(0), minorVersionFor(m))
	m.Tensors = append(m.Tensors, manifest.Tensor{Codec: manifest.CodecEntropy})
	require.Equal(t, uint16(1), minorVersionFor(m))
	m.Recipe.Sum = convert.SumSequential // the key, even with the old order's value
	require.Equal(t, uint16(2), minorVersionFor(m))
	require.ErrorIs(t, checkMinorVersion(m, 1), ErrVersion)
	require.ErrorIs(t, checkMinorVersion(m, 3), ErrStructure)
	require.NoError(t, checkMinorVersion(m, 2))
	m.Tensors[0].SourceSpan = strings.Repeat("0", 64)
	require.Equal(t, uint16(4), minorVersionFor(m))
	require.ErrorIs(t, checkMinorVersion(m, 3), ErrVersion)
	m.Minor = manifest.MinorKey()
	require.NoError(t, checkMinorVersion(m, 4))
	m.Tensors[1].SourceBLAKE3 = strings.Repeat("0", 64) // one kind for all tensors
	require.ErrorIs(t, checkMinorVersion(m, 4), manifest.ErrInvalid)
	m.Tensors[0].SourceSpan, m.Tensors[0].SourceBLAKE3 = "", strings.Repeat("0", 64)
	require.NoError(t, checkMinorVersion(m, 4), "1.4 files of source_blake3 stay valid")
}

// Format 1.4: the manifest's minor key fixes the preamble's minor version,
// and sections record piece chaining values, not chunk hashes.
func TestMinorVersion14(t *testing.T) {
	m := &manifest.Manifest{Minor: manifest.MinorKey()}
	require.Equal(t, uint16(4), minorVersionFor(m))
	require.NoError(t, checkMinorVersion(m, 4))
	require.ErrorIs(t, checkMinorVersion(m, 3), ErrVersion)
	require.ErrorIs(t, checkMinorVersion(m, 0), ErrVersion)

	hash := manifest.HexHash([32]byte{1})
	big := manifest.Section{Length: manifest.ChunkSize + 1, BLAKE3: hash, PieceCVs: []string{hash, hash}}
	m.Tensors = []manifest.Tensor{{Codec: manifest.CodecRaw, Section: big}}
	require.NoError(t, checkMinorVersion(m, 4))
	m.Minor = nil // piece_cvs without the minor key
	require.ErrorIs(t, checkMinorVersion(m, 4), manifest.ErrInvalid)
	require.ErrorIs(t, checkMinorVersion(m, 3), ErrVersion)
	m.Minor = manifest.MinorKey()
	m.Tensors[0].Section.PieceCVs, m.Tensors[0].Section.Chunks = nil, []string{hash, hash}
	require.ErrorIs(t, checkMinorVersion(m, 4), manifest.ErrInvalid, "chunks in 1.4")
	m.Minor = nil
	require.NoError(t, checkMinorVersion(m, 0), "chunks in 1.0")
	zero := 0
	m.Minor = &zero
	m.Format, m.Version = manifest.FormatName, manifest.Version
	require.ErrorContains(t, m.Validate(), "minor 0", `"minor": 0`)
}

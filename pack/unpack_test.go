package pack

import (
	"bytes"
	"encoding/binary"
	"math"
	"math/big"
	"os"
	"path/filepath"
	"testing"

	st "github.com/nlpodyssey/safetensors"
	"github.com/stretchr/testify/require"
	"github.com/x448/float16"

	"ternkit/convert"
	"ternkit/manifest"
)

func u64Shape(s []int64) []uint64 {
	out := make([]uint64, len(s))
	for i, d := range s {
		out[i] = uint64(d)
	}
	return out
}

// unpackFile opens art and unpacks it to dst.
func unpackFile(t *testing.T, art, dst, dtype string) *Artifact {
	t.Helper()
	a, err := Open(art)
	require.NoError(t, err)
	t.Cleanup(func() { a.Close() })
	require.NoError(t, Unpack(a, dst, dtype))
	return a
}

// The unpacked file is read by github.com/nlpodyssey/safetensors with the
// artifact's names and shapes; ternary values are the reader API's scale ×
// trit in the asked dtype, kept tensors the source bytes where the dtype
// matches (and always for non-float tensors).
func TestUnpackReadByIndependentLibrary(t *testing.T) {
	dir := t.TempDir()
	src, _ := testSource(t, dir)
	art := filepath.Join(dir, "a"+Extension)
	buildArtifact(t, src, art, Base3)
	srcFile, err := st.Deserialize(readFile(t, src))
	require.NoError(t, err)

	for _, dtype := range UnpackDTypes {
		t.Run(dtype, func(t *testing.T) {
			dst := filepath.Join(dir, "unpacked-"+dtype+".safetensors")
			a := unpackFile(t, art, dst, dtype)
			file := readFile(t, dst)
			got, err := st.Deserialize(file)
			require.NoError(t, err)
			_, md, err := st.ReadMetadata(file)
			require.NoError(t, err)
			require.Equal(t, "pack test", md.Metadata()["purpose"])
			require.Equal(t, manifest.HexHash(a.ManifestHash()), md.Metadata()[UnpackedFromKey])
			require.Equal(t, len(a.Tensors()), got.Len())

			for _, e := range a.Tensors() {
				v, ok := got.Tensor(e.Name)
				require.True(t, ok, e.Name)
				require.Equal(t, u64Shape(e.Shape), v.Shape(), e.Name)
				orig, _ := srcFile.Tensor(e.Name)
				if e.SourceDType == "I64" {
					require.Equal(t, "I64", v.DType().String())
					require.Equal(t, orig.Data(), v.Data(), "%s: non-float kept tensors keep their bytes", e.Name)
					continue
				}
				require.Equal(t, dtype, v.DType().String(), e.Name)
				if e.Kind == manifest.KindKept && e.SourceDType == dtype {
					require.Equal(t, orig.Data(), v.Data(), "%s: kept bytes unchanged", e.Name)
				}
				tn, err := a.Tensor(e.Name)
				require.NoError(t, err)
				want := make([]float32, tn.Len())
				require.NoError(t, tn.DecodeFloat32(want))
				checkFloats(t, e.Name, dtype, v.Data(), want)
			}
		})
	}
}

// checkFloats compares little-endian values of dtype with want, bit for
// bit, encoding with independent conversions: math.Float32bits (IEEE 754
// binary32), github.com/x448/float16 (binary16), and bfloat16 as the upper
// half of binary32 holding the value rounded to 8 significant bits, to
// nearest with ties to even (common practice), done by math/big's
// arbitrary-precision arithmetic.
func checkFloats(t *testing.T, name, dtype string, data []byte, want []float32) {
	t.Helper()
	for i, w := range want {
		switch dtype {
		case "F32":
			require.Equal(t, math.Float32bits(w), binary.LittleEndian.Uint32(data[4*i:]), "%s[%d]", name, i)
		case "F16":
			require.Equal(t, float16.Fromfloat32(w).Bits(), binary.LittleEndian.Uint16(data[2*i:]), "%s[%d]", name, i)
		case "BF16":
			require.False(t, math.IsNaN(float64(w)), "%s[%d] is NaN", name, i)
			r, _ := new(big.Float).SetPrec(8).SetMode(big.ToNearestEven).SetFloat64(float64(w)).Float32()
			b := math.Float32bits(r)
			require.Zero(t, b&0xffff, "%s[%d]: 8 significant bits fit the upper half", name, i)
			require.Equal(t, uint16(b>>16), binary.LittleEndian.Uint16(data[2*i:]), "%s[%d]", name, i)
		}
	}
}

// Packing the unpacked checkpoint again gives the same trits: a dequantized
// tensor holds only 0 and ±scale, whose absmean is scale × (nonzero
// fraction) ≤ scale, so every ±scale rounds back to ±1.
func TestUnpackRepackKeepsTrits(t *testing.T) {
	dir := t.TempDir()
	src, _ := testSource(t, dir)
	art := filepath.Join(dir, "a"+Extension)
	buildArtifact(t, src, art, Bits2)
	unpacked := filepath.Join(dir, "u.safetensors")
	a := unpackFile(t, art, unpacked, "F32")
	again := filepath.Join(dir, "again"+Extension)
	buildArtifact(t, unpacked, again, Bits2)
	b, err := Open(again)
	require.NoError(t, err)
	defer b.Close()
	checked := 0
	for _, e := range a.Tensors() {
		if e.Kind != manifest.KindTernary || manifest.NumElements(e.Shape) == 0 {
			continue
		}
		ta, _ := a.Tensor(e.Name)
		tb, err := b.Tensor(e.Name)
		require.NoError(t, err)
		want, got := make([]int8, ta.Len()), make([]int8, tb.Len())
		require.NoError(t, ta.DecodeTrits(want))
		require.NoError(t, tb.DecodeTrits(got))
		require.Equal(t, want, got, e.Name)
		checked++
	}
	require.Equal(t, 2, checked)
}

func TestUnpackRejects(t *testing.T) {
	dir := t.TempDir()
	src, _ := testSource(t, dir)
	art := filepath.Join(dir, "a"+Extension)
	buildArtifact(t, src, art, Base3)
	a, err := Open(art)
	require.NoError(t, err)
	dst := filepath.Join(dir, "u.safetensors")
	require.ErrorIs(t, Unpack(a, dst, "I8"), convert.ErrDType)
	a.Close()

	// A changed section byte: the hash check stops the unpack, naming the
	// tensor and offset, and nothing is written.
	b := readFile(t, art)
	e := a.Manifest().Tensors[1]
	b[e.Section.Offset] ^= 1
	bad := filepath.Join(dir, "bad"+Extension)
	require.NoError(t, os.WriteFile(bad, b, 0o644))
	c, err := NewReader(bytes.NewReader(b), int64(len(b)))
	require.NoError(t, err)
	err = Unpack(c, dst, "F32")
	require.ErrorIs(t, err, ErrHash)
	require.Contains(t, err.Error(), e.Name)
	require.NoFileExists(t, dst)
	entries, err := os.ReadDir(dir)
	require.NoError(t, err)
	require.Len(t, entries, 3, "source, artifact, corrupt copy: no temporary file")
}

package pack_test

import (
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/manifest"
	"ternkit/pack"
	"ternkit/verify"
)

// dtypeSource writes a checkpoint holding 8-bit float matrices, an integer
// matrix and a BOOL vector, and returns its path.
func dtypeSource(t *testing.T, dir string) string {
	t.Helper()
	e4m3 := make([]byte, 4*8)
	e5m2 := make([]byte, 4*8)
	for i := range e4m3 {
		// Sign, exponent and fraction bits vary; 0x7F/0xFF (E4M3 NaN) and
		// exponent 31 (E5M2 Inf/NaN) are avoided.
		e4m3[i] = byte(i*37) % 0x7F
		e5m2[i] = byte(i*41) % 0x7C
		if i%3 == 0 {
			e4m3[i] |= 0x80
			e5m2[i] |= 0x80
		}
	}
	path := filepath.Join(dir, "dtypes.safetensors")
	require.NoError(t, convert.WriteFile(path, []convert.WriteTensor{
		{Name: "blocks.0.fp8a.weight", DType: "F8_E4M3", Shape: []int64{4, 8}, Data: e4m3},
		{Name: "blocks.0.fp8b.weight", DType: "F8_E5M2", Shape: []int64{4, 8}, Data: e5m2},
		{Name: "blocks.0.index", DType: "I32", Shape: []int64{2, 2}, Data: make([]byte, 16)},
		{Name: "blocks.0.mask", DType: "BOOL", Shape: []int64{3}, Data: []byte{1, 0, 1}},
	}, nil))
	return path
}

// ternarizeMatrices asks for every 2-D tensor to be ternarized.
var ternarizeMatrices = &convert.Policy{Rules: []convert.Rule{
	{Match: "*", Dims: 2, Action: convert.Action{Kind: convert.ActTernary, Granularity: convert.PerTensor}},
}}

// A policy may ternarize 8-bit float tensors; the result verifies against
// the source. Integer and BOOL tensors stay kept even when a rule asks to
// ternarize every matrix.
func TestBuildEightBitFloats(t *testing.T) {
	dir := t.TempDir()
	src := dtypeSource(t, dir)
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()

	dst := filepath.Join(dir, "fp8"+pack.Extension)
	m, err := pack.Build(s, dst, pack.Options{Codec: pack.Base3, Recipe: convert.DefaultRecipe(), Policy: ternarizeMatrices})
	require.NoError(t, err)
	kinds := map[string]string{}
	for _, e := range m.Tensors {
		kinds[e.Name] = e.Kind
	}
	require.Equal(t, map[string]string{
		"blocks.0.fp8a.weight": manifest.KindTernary, "blocks.0.fp8b.weight": manifest.KindTernary,
		"blocks.0.index": manifest.KindKept, "blocks.0.mask": manifest.KindKept,
	}, kinds)
	rep, err := verify.Run(dst, verify.Options{Source: s})
	require.NoError(t, err)
	require.True(t, rep.OK(), "%+v", rep.Failures())
}

// A tensor of a dtype convert does not know is kept byte for byte by the
// default policy and verifies against its source; a policy that asks to
// ternarize it gets ErrDType.
func TestBuildUnknownDType(t *testing.T) {
	dir := t.TempDir()
	header := `{"blocks.0.packed.weight":{"dtype":"F4_PACKED","shape":[2,3],"data_offsets":[0,3]},` +
		`"blocks.0.norm.weight":{"dtype":"U8","shape":[2],"data_offsets":[3,5]}}`
	for len(header)%8 != 0 {
		header += " "
	}
	file := append(le64(uint64(len(header))), header...)
	file = append(file, 0x12, 0x34, 0x56, 7, 8)
	src := filepath.Join(dir, "unknown.safetensors")
	require.NoError(t, os.WriteFile(src, file, 0o644))
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()

	dst := filepath.Join(dir, "kept"+pack.Extension)
	m, err := pack.Build(s, dst, pack.Options{Codec: pack.Bits2, Recipe: convert.DefaultRecipe()})
	require.NoError(t, err)
	require.Equal(t, manifest.KindKept, m.Tensors[0].Kind)
	a, err := pack.Open(dst)
	require.NoError(t, err)
	defer a.Close()
	tn, err := a.Tensor("blocks.0.packed.weight")
	require.NoError(t, err)
	p, err := tn.Payload()
	require.NoError(t, err)
	require.Equal(t, []byte{0x12, 0x34, 0x56}, p)
	rep, err := verify.Run(dst, verify.Options{Source: s})
	require.NoError(t, err)
	require.True(t, rep.OK(), "%+v", rep.Failures())

	dst = filepath.Join(dir, "refused"+pack.Extension)
	_, err = pack.Build(s, dst, pack.Options{Codec: pack.Bits2, Recipe: convert.DefaultRecipe(), Policy: ternarizeMatrices})
	require.ErrorIs(t, err, convert.ErrDType)
	require.Contains(t, err.Error(), `tensor "blocks.0.packed.weight"`)
	_, statErr := os.Stat(dst)
	require.ErrorIs(t, statErr, os.ErrNotExist)
}

func le64(v uint64) []byte {
	b := make([]byte, 8)
	for i := range b {
		b[i] = byte(v >> (8 * i))
	}
	return b
}

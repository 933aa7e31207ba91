package verify

import (
	"fmt"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/pack"
)

// Int8 and dtype-changed tensors are checked a piece at a time; the report
// (every check, the bound's closest element included) is the same for any
// piece size, and a changed code is named by its index in the tensor.
func TestAgainstInPieces(t *testing.T) {
	dir := t.TempDir()
	src, art, _ := bf16Fixture(t, dir, pack.Bits2)
	out := filepath.Join(dir, "code.tkart")
	var was int8
	rewriteSection(t, art, out, "blocks.0.mlp.down.weight", false, func(p []byte) {
		was = int8(p[52]) // row 7 of 7 columns
		p[52] = byte(was/2 + 3)
	})
	norm := filepath.Join(dir, "norm.tkart")
	rewriteSection(t, art, norm, "blocks.0.norm.weight", false, func(p []byte) { p[33] ^= 0x01 }) // element 16, an F16 byte

	whole := runAgainst(t, art, src)
	require.True(t, whole.OK(), "%+v", whole.Failures())
	defer func(n int) { pieceElements = n }(pieceElements)
	for _, piece := range []int{1, 7, 8, 15} {
		pieceElements = piece
		rep := runAgainst(t, art, src)
		require.Equal(t, whole, rep, "piece of %d elements", piece)
		require.Equal(t, fmt.Sprintf("int8 code 52 is %d, re-quantizing the source gives %d", was/2+3, was),
			requantizeDetail(t, out, src, "blocks.0.mlp.down.weight"), "piece of %d elements", piece)
		c, ok := runAgainst(t, norm, src).Find(CheckKept, "blocks.0.norm.weight")
		require.True(t, ok)
		require.False(t, c.OK, "piece of %d elements", piece)
		require.Contains(t, c.Detail, "F16 bytes at artifact byte", "piece of %d elements", piece)
	}
}

// The int8 bound's largest excess and its element, found a piece at a
// time, are those of one pass over the whole tensor.
func TestInt8BoundInPieces(t *testing.T) {
	dir := t.TempDir()
	_, art, data := bf16Fixture(t, dir, pack.Bits2)
	a, err := pack.Open(art)
	require.NoError(t, err)
	defer a.Close()
	const name = "blocks.0.mlp.down.weight" // 10 rows of 7, int8
	tensor, err := a.Tensor(name)
	require.NoError(t, err)
	raw := data[name]
	w := make([]float32, tensor.Len())
	require.NoError(t, convert.DecodeFloat32("BF16", raw, w))
	payload, err := tensor.Payload()
	require.NoError(t, err)
	codes := make([]int8, len(payload))
	for i, c := range payload {
		codes[i] = int8(c)
	}
	scales, err := tensor.Scales()
	require.NoError(t, err)
	wantExcess, wantAt := convert.Int8BoundExcess(w, codes, scales, 7)
	require.Greater(t, wantAt, 6, "the largest excess lies past the first row, so pieces matter")

	defer func(n int) { pieceElements = n }(pieceElements)
	for _, piece := range []int{1, 7, 14, 1 << 20} {
		pieceElements = piece
		var b redoBuffers
		var v tensorVerdict
		require.Empty(t, b.redoInt8(a, tensor, raw, &v), "piece of %d elements", piece)
		require.Equal(t, wantExcess, v.excess, "piece of %d elements", piece)
		require.Equal(t, wantAt, v.at, "piece of %d elements", piece)
	}
}

// Equal rows tie on their largest excess: the first row's element is
// named, whether the rows come in one piece or two.
func TestInt8BoundTieInPieces(t *testing.T) {
	dir := t.TempDir()
	row := []float32{0.31, -0.77, 0.052, 1.9, -0.4}
	w := append(append([]float32{}, row...), row...)
	raw, err := convert.EncodeFloat32(nil, "F32", w)
	require.NoError(t, err)
	src := filepath.Join(dir, "src.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{{Name: "embed", DType: "F32", Shape: []int64{2, 5}, Data: raw}}, nil))
	r, err := convert.ParseRule("embed=int8")
	require.NoError(t, err)
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	art := filepath.Join(dir, "a.tkart")
	_, err = pack.Build(s, art, pack.Options{Codec: pack.Bits2, Recipe: convert.DefaultRecipe(), Policy: &convert.Policy{Rules: []convert.Rule{r}}})
	require.NoError(t, err)
	a, err := pack.Open(art)
	require.NoError(t, err)
	defer a.Close()
	tensor, err := a.Tensor("embed")
	require.NoError(t, err)
	defer func(n int) { pieceElements = n }(pieceElements)
	for _, piece := range []int{5, 10} {
		pieceElements = piece
		var b redoBuffers
		var v tensorVerdict
		require.Empty(t, b.redoInt8(a, tensor, raw, &v))
		require.GreaterOrEqual(t, v.at, 0)
		require.Less(t, v.at, 5, "piece of %d elements: the first of the tied rows", piece)
	}
}

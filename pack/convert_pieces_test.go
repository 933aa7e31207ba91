package pack

import (
	"encoding/binary"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/testweights"
)

// Int8 and dtype-changing tensors are decoded and coded a piece at a
// time; the artifact is the same for any piece size: pieces of one
// element, of a part of a row, of whole rows with a rest, and of the whole
// tensor.
func TestConvertedTensorsInPieces(t *testing.T) {
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(41, 42))
	src := filepath.Join(dir, "src.safetensors")
	f64 := make([]byte, 8*9*13)
	for i, v := range testweights.Gaussian(rng, 9*13) {
		binary.LittleEndian.PutUint64(f64[8*i:], math.Float64bits(float64(v)*3))
	}
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "embed", DType: "BF16", Shape: []int64{37, 11}, Data: bf16Bytes(t, testweights.Gaussian(rng, 37*11))},
		{Name: "embed64", DType: "F64", Shape: []int64{9, 13}, Data: f64},
		{Name: "head", DType: "F32", Shape: []int64{23, 7}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 23*7))},
		{Name: "norm", DType: "BF16", Shape: []int64{29}, Data: bf16Bytes(t, testweights.Gaussian(rng, 29))},
		{Name: "wide", DType: "F16", Shape: []int64{3, 5}, Data: make([]byte, 30)},
	}, nil))
	policy := mustPolicy(t, "embed*=int8", "head=keep:f16", "norm=keep:f32", "wide=keep:bf16")
	pack := func(name string, piece int) []byte {
		defer func(n int) { pieceElements = n }(pieceElements)
		pieceElements = piece
		s, err := convert.Open(src)
		require.NoError(t, err)
		defer s.Close()
		dst := filepath.Join(dir, name)
		_, err = Build(s, dst, Options{Codec: Bits2, Recipe: convert.DefaultRecipe(), Policy: policy, Tool: "ternkit test"})
		require.NoError(t, err)
		b, err := os.ReadFile(dst)
		require.NoError(t, err)
		return b
	}
	whole := pack("whole", 1<<30)
	for _, piece := range []int{1, 5, 11, 12, 30} {
		require.Equal(t, whole, pack("piece", piece), "piece of %d elements", piece)
	}
}

// A value that overflows in a later piece is named by its element and
// byte offset in the whole tensor.
func TestConvertedTensorErrorInLaterPiece(t *testing.T) {
	defer func(n int) { pieceElements = n }(pieceElements)
	pieceElements = 4
	dir := t.TempDir()
	src := filepath.Join(dir, "src.safetensors")
	f64 := make([]byte, 8*6*2)
	binary.LittleEndian.PutUint64(f64[8*9:], math.Float64bits(math.MaxFloat64)) // element 9, in the fifth piece of two rows
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "embed", DType: "F64", Shape: []int64{6, 2}, Data: f64},
	}, nil))
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	_, err = Build(s, filepath.Join(dir, "out"), Options{Codec: Bits2, Recipe: convert.DefaultRecipe(), Policy: mustPolicy(t, "embed=int8"), Tool: "ternkit test"})
	var ie *convert.InputError
	require.ErrorAs(t, err, &ie)
	require.Equal(t, s.Tensors[0].Offset+9*8, ie.Offset)
	require.ErrorContains(t, err, "element 9")
	require.NoFileExists(t, filepath.Join(dir, "out"))
}

func bf16Bytes(t *testing.T, v []float32) []byte {
	b, err := convert.EncodeFloat32(nil, "BF16", v)
	require.NoError(t, err)
	return b
}

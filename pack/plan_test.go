package pack

import (
	"math/rand/v2"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/testweights"
)

// Plan predicts every entry Build writes, for every action, from the
// header and the policy alone: verify --against relies on it.
func TestPlanMatchesBuild(t *testing.T) {
	rng := rand.New(rand.NewPCG(41, 42))
	dir := t.TempDir()
	src := filepath.Join(dir, "src.safetensors")
	f32 := func(n int) []byte { return testweights.F32Bytes(testweights.Gaussian(rng, n)) }
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "t", DType: "F32", Shape: []int64{4, 8}, Data: f32(32)},
		{Name: "r", DType: "F32", Shape: []int64{4, 8}, Data: f32(32)},
		{Name: "g", DType: "F32", Shape: []int64{4, 8}, Data: f32(32)},
		{Name: "i", DType: "F32", Shape: []int64{4, 8}, Data: f32(32)},
		{Name: "k16", DType: "F32", Shape: []int64{8}, Data: f32(8)},
		{Name: "kb16", DType: "F32", Shape: []int64{8}, Data: f32(8)},
		{Name: "k32", DType: "F16", Shape: []int64{8}, Data: make([]byte, 16)},
		{Name: "same", DType: "F32", Shape: []int64{8}, Data: f32(8)},
		{Name: "keep", DType: "F32", Shape: []int64{2, 4}, Data: f32(8)},
		{Name: "n/o/rule", DType: "F32", Shape: []int64{8}, Data: f32(8)},
		{Name: "step", DType: "I64", Shape: []int64{}, Data: make([]byte, 8)},
	}, nil))
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	policy := mustPolicy(t, "t=ternary", "r=ternary:row", "g=ternary:group:4", "i=int8",
		"k16=keep:f16", "kb16=keep:bf16", "k32=keep:f32", "same=keep:f32", "keep=keep", "step=ternary")
	m, err := Build(s, filepath.Join(dir, "a"+Extension), Options{Codec: Auto, Recipe: convert.DefaultRecipe(), Policy: policy})
	require.NoError(t, err)
	require.Len(t, m.Tensors, len(s.Tensors))
	for i, st := range s.Tensors {
		a, _, err := policy.Decide(st)
		require.NoError(t, err)
		require.Equal(t, Plan(st, a), PlanOf(&m.Tensors[i]), st.Name)
	}
}

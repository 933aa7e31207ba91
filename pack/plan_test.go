package pack

import (
	"bytes"
	"fmt"
	"math/rand/v2"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/testweights"
	"ternkit/manifest"
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

// A checkpoint whose manifest would pass the reader's limit is refused
// before anything is written; the estimate never exceeds the manifest.
func TestBuildRefusesManifestPastTheLimit(t *testing.T) {
	dir := t.TempDir()
	var ts []convert.WriteTensor
	for i := range 300 {
		ts = append(ts, convert.WriteTensor{Name: fmt.Sprintf("model.layers.%d.mlp.experts.%d.gate_proj.weight", i/10, i%10), DType: "F32", Shape: []int64{1}, Data: make([]byte, 4)})
	}
	src := filepath.Join(dir, "many.safetensors")
	require.NoError(t, convert.WriteFile(src, ts, nil))
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	ok := filepath.Join(dir, "ok"+Extension)
	m, err := Build(s, ok, Options{Codec: Base3, Recipe: convert.DefaultRecipe()})
	require.NoError(t, err)
	body, err := manifest.Encode(m)
	require.NoError(t, err)
	actions := map[*convert.Tensor]convert.Action{}
	for _, st := range s.Tensors {
		actions[st], _, _ = convert.DefaultPolicy().Decide(st)
	}
	bound, err := manifestLowerBound(s, actions)
	require.NoError(t, err)
	require.LessOrEqual(t, bound, int64(len(body)))
	require.Greater(t, bound, int64(len(body))*3/4, "the estimate is close")

	defer func(n int64) { writeMaxManifest = n }(writeMaxManifest)
	for _, limit := range []int64{bound - 1, int64(len(body)) - 1} {
		writeMaxManifest = limit
		dst := filepath.Join(dir, "big"+Extension)
		_, err = Build(s, dst, Options{Codec: Base3, Recipe: convert.DefaultRecipe()})
		require.ErrorIs(t, err, ErrManifestTooLarge, "limit %d", limit)
		require.NoFileExists(t, dst)
	}
}

// The manifest written one entry at a time is manifest.Encode's bytes.
func TestWriteManifestIsEncode(t *testing.T) {
	dir := t.TempDir()
	src, _ := testSource(t, dir)
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	m, err := Build(s, filepath.Join(dir, "a"+Extension), Options{Codec: Auto, Recipe: convert.DefaultRecipe(), Tool: "<&> tool"})
	require.NoError(t, err)
	m.Source.Metadata = map[string]string{"tensors": "null", `"tensors":null`: "<b>"}
	for _, ts := range [][]manifest.Tensor{m.Tensors, {}, m.Tensors[:1]} {
		mm := *m
		mm.Tensors = ts
		want, err := manifest.Encode(&mm)
		require.NoError(t, err)
		var got bytes.Buffer
		n, err := writeManifest(&got, &mm)
		require.NoError(t, err)
		require.Equal(t, string(want), got.String())
		require.Equal(t, int64(len(want)), n)
	}
}

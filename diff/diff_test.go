package diff

import (
	"math"
	"math/rand/v2"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/testweights"
	"ternkit/manifest"
	"ternkit/pack"
)

type release struct {
	tensors []convert.WriteTensor
	meta    map[string]string
	codec   pack.Codec
	keep    string // names containing it are kept, besides the default policy
	rules   []string
	tie     convert.TieRule // "" for the default
}

func build(t *testing.T, dir, name string, r release) *pack.Artifact {
	t.Helper()
	src := filepath.Join(dir, name+".safetensors")
	require.NoError(t, convert.WriteFile(src, r.tensors, r.meta))
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	policy := convert.DefaultPolicy()
	if r.keep != "" {
		keep, err := convert.ParseRule("*" + r.keep + "*=keep")
		require.NoError(t, err)
		policy.Rules = append([]convert.Rule{keep}, policy.Rules...)
	}
	recipe := convert.DefaultRecipe()
	if r.tie != "" {
		recipe.Tie = r.tie
	}
	art := filepath.Join(dir, name+pack.Extension)
	_, err = pack.Build(s, art, pack.Options{Codec: r.codec, Recipe: recipe, Policy: policy,
		PolicyRules: r.rules, Tool: "ternkit test"})
	require.NoError(t, err)
	a, err := pack.Open(art)
	require.NoError(t, err)
	t.Cleanup(func() { a.Close() })
	return a
}

func TestCompare(t *testing.T) {
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(3, 4))
	q, up, old, shaped := testweights.Gaussian(rng, 8*16), testweights.Gaussian(rng, 5*7), testweights.Gaussian(rng, 16), testweights.Gaussian(rng, 16)
	norm := make([]float32, 16)
	for i := range norm {
		norm[i] = 1
	}
	a := build(t, dir, "a", release{
		tensors: []convert.WriteTensor{
			{Name: "blocks.0.attn.q.weight", DType: "F32", Shape: []int64{8, 16}, Data: testweights.F32Bytes(q)},
			{Name: "blocks.0.mlp.up.weight", DType: "F32", Shape: []int64{5, 7}, Data: testweights.F32Bytes(up)},
			{Name: "blocks.0.norm.weight", DType: "F32", Shape: []int64{16}, Data: testweights.F32Bytes(norm)},
			{Name: "blocks.0.old.weight", DType: "F32", Shape: []int64{4, 4}, Data: testweights.F32Bytes(old)},
			{Name: "blocks.0.shaped.weight", DType: "F32", Shape: []int64{4, 4}, Data: testweights.F32Bytes(shaped)},
		},
		meta: map[string]string{"release": "1", "model": "scout"}, codec: pack.Base3, rules: []string{"default"},
	})

	// Release B: the sign of 5 weights whose trit is nonzero is flipped
	// (the absmean, so the scale, is unchanged: exactly 5 trits differ);
	// mlp.up is now kept; one tensor removed, one added, one reshaped.
	q2 := append([]float32(nil), q...)
	flipped := 0
	for i := 0; flipped < 5; i++ {
		if math.Abs(float64(q2[i])) > 1.5 { // well above the absmean of a unit Gaussian (0.80)
			q2[i] = -q2[i]
			flipped++
		}
	}
	b := build(t, dir, "b", release{
		tensors: []convert.WriteTensor{
			{Name: "blocks.0.attn.q.weight", DType: "F32", Shape: []int64{8, 16}, Data: testweights.F32Bytes(q2)},
			{Name: "blocks.0.mlp.up.weight", DType: "F32", Shape: []int64{5, 7}, Data: testweights.F32Bytes(up)},
			{Name: "blocks.0.norm.weight", DType: "F32", Shape: []int64{16}, Data: testweights.F32Bytes(norm)},
			{Name: "blocks.0.shaped.weight", DType: "F32", Shape: []int64{2, 8}, Data: testweights.F32Bytes(shaped)},
			{Name: "blocks.0.new.weight", DType: "F32", Shape: []int64{3, 3}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 9))},
		},
		meta: map[string]string{"release": "2", "model": "scout"}, codec: pack.Base3, keep: "mlp.up", rules: []string{"keep mlp.up", "default"},
	})

	r, err := Compare(a, b)
	require.NoError(t, err)
	require.False(t, r.Same())

	fields := map[string]Change{}
	for _, c := range r.Provenance {
		fields[c.Field] = c
	}
	require.Len(t, fields, 3, "%+v", r.Provenance)
	require.Equal(t, Change{"policy", `["default"]`, `["keep mlp.up" "default"]`}, fields["policy"])
	require.Equal(t, Change{"source.metadata.release", `"1"`, `"2"`}, fields["source.metadata.release"])
	require.Contains(t, fields, "source.files[0]", "the source file changed: other name and bytes")

	require.Equal(t, []Tensor{{Name: "blocks.0.new.weight", Shape: []int64{3, 3}, Kind: manifest.KindTernary, Codec: "base3", Bytes: 2}}, r.Added)
	require.Equal(t, []Tensor{{Name: "blocks.0.old.weight", Shape: []int64{4, 4}, Kind: manifest.KindTernary, Codec: "base3", Bytes: 4}}, r.Removed)
	require.Equal(t, []Reshape{{Name: "blocks.0.shaped.weight", ShapeA: []int64{4, 4}, ShapeB: []int64{2, 8}}}, r.Reshaped)

	require.Len(t, r.Changed, 2)
	qc, upc := r.Changed[0], r.Changed[1]
	require.Equal(t, "blocks.0.attn.q.weight", qc.Name)
	require.Equal(t, []string{AspectTrits, AspectSource}, qc.Changed)
	require.Equal(t, int64(128), qc.TritsCompared)
	require.Equal(t, int64(5), qc.TritsDiffer)
	require.Equal(t, 5.0/128, qc.TritsFraction)
	require.Equal(t, qc.ScaleA, qc.ScaleB)

	require.Equal(t, "blocks.0.mlp.up.weight", upc.Name)
	require.Equal(t, []string{AspectKind, AspectCodec, AspectStored, AspectGran, AspectScale, AspectBytes}, upc.Changed)
	require.Equal(t, manifest.KindTernary, upc.KindA)
	require.Equal(t, manifest.KindKept, upc.KindB)
	require.Equal(t, int64(7), upc.BytesA, "35 trits in base3: ceil(35/5)")
	require.Equal(t, int64(140), upc.BytesB, "35 F32 values")
	require.Zero(t, upc.TritsCompared)

	require.Equal(t, Totals{TensorsA: 5, TensorsB: 5, Added: 1, Removed: 1, Reshaped: 1, Changed: 2, Unchanged: 1,
		BytesA: a.Size(), BytesB: b.Size(), TritsCompared: 128, TritsDiffer: 5, TritsFraction: 5.0 / 128}, r.Totals)
}

// The same source in another codec: the trits are the same, the codec and
// the size differ.
func TestCompareCodecOnly(t *testing.T) {
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(5, 6))
	tensors := []convert.WriteTensor{{Name: "w", DType: "F32", Shape: []int64{6, 10}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 60))}}
	a := build(t, dir, "a", release{tensors: tensors, codec: pack.Base3})
	b := build(t, t.TempDir(), "a", release{tensors: tensors, codec: pack.Bits2})
	r, err := Compare(a, b)
	require.NoError(t, err)
	require.Empty(t, r.Provenance, "same source file name and bytes, same recipe")
	require.Len(t, r.Changed, 1)
	c := r.Changed[0]
	require.Equal(t, []string{AspectCodec, AspectBytes}, c.Changed)
	require.Equal(t, int64(60), c.TritsCompared)
	require.Zero(t, c.TritsDiffer)
	require.Equal(t, int64(12), c.BytesA, "60 trits, 5 per byte")
	require.Equal(t, int64(15), c.BytesB, "60 trits, 4 per byte")

	c2 := build(t, t.TempDir(), "a", release{tensors: tensors, codec: pack.Base3, tie: convert.TieHalfAway})
	r, err = Compare(a, c2)
	require.NoError(t, err)
	require.Equal(t, []Change{{"recipe.tie", `"half-even"`, `"half-away"`}}, r.Provenance)

	same, err := Compare(a, a)
	require.NoError(t, err)
	require.True(t, same.Same())
	require.Equal(t, 1, same.Totals.Unchanged)
}

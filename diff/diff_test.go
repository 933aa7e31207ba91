package diff

import (
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
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

	r, err := Compare(a, b, Options{Trits: true})
	require.NoError(t, err)
	require.False(t, r.Same())
	require.True(t, r.Compared.Trits)

	fields := map[string]Change{}
	for _, c := range r.Provenance {
		fields[c.Field] = c
	}
	require.Len(t, fields, 3, "%+v", r.Provenance)
	require.Equal(t, Change{"policy", "default", "keep mlp.up; default", []string{"keep mlp.up"}, nil}, fields["policy"], "rules in words, not Go syntax")
	require.Equal(t, Change{Field: "source.metadata.release", A: "1", B: "2"}, fields["source.metadata.release"])
	require.Contains(t, fields, "source.files[0]", "the source file changed: other name and bytes")

	require.Equal(t, []Tensor{{Name: "blocks.0.new.weight", Shape: []int64{3, 3}, Kind: manifest.KindTernary, Codec: "base3", Bytes: 2}}, r.Added)
	require.Equal(t, []Tensor{{Name: "blocks.0.old.weight", Shape: []int64{4, 4}, Kind: manifest.KindTernary, Codec: "base3", Bytes: 4}}, r.Removed)
	require.Equal(t, []Reshape{{Name: "blocks.0.shaped.weight", ShapeA: []int64{4, 4}, ShapeB: []int64{2, 8}}}, r.Reshaped)

	require.Len(t, r.Changed, 2)
	qc, upc := r.Changed[0], r.Changed[1]
	require.Equal(t, "blocks.0.attn.q.weight", qc.Name)
	// Flipping the sign of a weight whose trit is nonzero leaves |w − s·t|,
	// and so every statistic, unchanged.
	require.Equal(t, []string{AspectTrits, AspectSource}, qc.Changed)
	require.True(t, qc.SectionsDiffer)
	require.NotNil(t, qc.ScaleDrift)
	require.Zero(t, *qc.ScaleDrift)
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
		BytesA: a.Size(), BytesB: b.Size(), SectionsDiffer: 2, TritsCompared: 128, TritsDiffer: 5, TritsFraction: 5.0 / 128}, r.Totals)

	// Without Options.Trits, no trit is decoded and none is claimed compared:
	// the section bytes are said to differ.
	r, err = Compare(a, b)
	require.NoError(t, err)
	require.False(t, r.Compared.Trits)
	require.Contains(t, r.Compared.Summary, "trits not decoded")
	require.Zero(t, r.Totals.TritsCompared)
	require.Equal(t, []string{AspectSource, AspectData}, r.Changed[0].Changed)
}

// The same source in another codec: the trits are the same, the codec and
// the size differ.
func TestCompareCodecOnly(t *testing.T) {
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(5, 6))
	tensors := []convert.WriteTensor{{Name: "w", DType: "F32", Shape: []int64{6, 10}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 60))}}
	a := build(t, dir, "a", release{tensors: tensors, codec: pack.Base3})
	b := build(t, t.TempDir(), "a", release{tensors: tensors, codec: pack.Bits2})
	r, err := Compare(a, b, Options{Trits: true})
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
	require.Equal(t, []Change{{Field: "recipe.tie", A: "half-even", B: "half-away"}}, r.Provenance)

	same, err := Compare(a, a)
	require.NoError(t, err)
	require.True(t, same.Same())
	require.Equal(t, 1, same.Totals.Unchanged)
}

// A byte flipped in a section after packing leaves the manifest as it
// was: diff reads the section bytes, so it sees the change, counts the
// trit with Options.Trits, and lists the section whose bytes no longer
// match their recorded BLAKE3.
func TestCompareReadsSections(t *testing.T) {
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(7, 8))
	tensors := []convert.WriteTensor{{Name: "w", DType: "F32", Shape: []int64{10, 10}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 100))}}
	a := build(t, dir, "a", release{tensors: tensors, codec: pack.Bits2})
	e := a.Manifest().Tensors[0]
	b, err := os.ReadFile(filepath.Join(dir, "a"+pack.Extension))
	require.NoError(t, err)
	// bits2 holds 4 trits per byte, 2 bits each (pack/FORMAT.md): code 0b01
	// and 0b10 are two nonzero trits, so xor 0b11 on a nonzero trit's bits
	// flips its sign and changes exactly one trit.
	x := make([]int8, 100)
	require.NoError(t, pack.Bits2.Decode(x, b[e.Section.Offset:e.Section.Offset+e.Section.Length]))
	i := slices.IndexFunc(x, func(v int8) bool { return v != 0 })
	b[e.Section.Offset+int64(i/4)] ^= 0b11 << (2 * (i % 4))
	flipped := filepath.Join(dir, "flipped"+pack.Extension)
	require.NoError(t, os.WriteFile(flipped, b, 0o644))
	fb, err := pack.Open(flipped)
	require.NoError(t, err)
	defer fb.Close()

	r, err := Compare(a, fb)
	require.NoError(t, err)
	require.False(t, r.Same())
	require.Equal(t, 1, r.Totals.SectionsDiffer)
	require.Equal(t, []string{AspectData}, r.Changed[0].Changed)
	require.Equal(t, []Mismatch{{Artifact: "b", Tensor: "w", Section: "payload", Recorded: e.Section.BLAKE3, Actual: r.Mismatches[0].Actual}}, r.Mismatches)
	require.NotEqual(t, e.Section.BLAKE3, r.Mismatches[0].Actual)

	r, err = Compare(a, fb, Options{Trits: true})
	require.NoError(t, err)
	require.Equal(t, int64(1), r.Totals.TritsDiffer)
	require.Equal(t, int64(100), r.Totals.TritsCompared)
	require.Equal(t, []string{AspectTrits}, r.Changed[0].Changed)
}

func TestConditions(t *testing.T) {
	for _, s := range []string{"trits", "added", "removed", "reshaped", "kind", "sections", "any", "scale=0.01", "rel_rmse=0", "cosine=0.001", "zero_fraction=0.02"} {
		c, err := ParseCondition(s)
		require.NoError(t, err, s)
		require.Equal(t, s, c.String())
	}
	for _, s := range []string{"trit", "scale", "scale=-1", "scale=x", "added=1", "rel_rmse=NaN", ""} {
		_, err := ParseCondition(s)
		require.ErrorIs(t, err, ErrCondition, s)
	}

	drift, same := 0.02, 0.0
	ra, rb, ca, cb := 0.50, 0.52, 0.90, 0.899
	r := &Report{
		Added:   []Tensor{{Name: "new"}},
		Changed: []TensorChange{{Name: "q", KindA: "ternary", KindB: "ternary", GranA: "tensor", GranB: "tensor", ScaleDrift: &drift, RelRMSEA: &ra, RelRMSEB: &rb, CosineA: &ca, CosineB: &cb, ZeroA: &same, ZeroB: &same}},
		Totals:  Totals{Added: 1, Changed: 1, TritsCompared: 10, TritsDiffer: 2},
	}
	cases := []struct {
		cond string
		want string // "" when it must not hold
	}{
		{"trits", "2 of 10 trits differ"},
		{"added", `1 tensor(s) added, first "new"`},
		{"removed", ""},
		{"scale=0.01", "q (scale drift 0.02)"},
		{"scale=0.02", ""}, // the limit itself passes: "above" the value
		{"rel_rmse=0.01", "q (rel_rmse 0.5000 -> 0.5200)"},
		{"rel_rmse=0.03", ""},
		{"cosine=0.0005", "q (cosine 0.9000 -> 0.8990)"},
		{"cosine=0.002", ""},
		{"zero_fraction=0", ""},
		{"any", "the artifacts differ"},
	}
	for _, c := range cases {
		cond, err := ParseCondition(c.cond)
		require.NoError(t, err)
		got := r.Failures([]Condition{cond})
		if c.want == "" {
			require.Empty(t, got, c.cond)
		} else {
			require.Equal(t, []string{c.cond + ": " + c.want}, got)
		}
	}
	// another granularity leaves scales incomparable: that holds for scale=R
	r.Changed[0].ScaleDrift, r.Changed[0].GranB = nil, "row"
	require.Equal(t, []string{"scale=0.5: q (scales not comparable: granularity tensor -> row)"}, r.Failures([]Condition{{Name: CondScale, Limit: 0.5}}))
}

// Any text: no panic; a condition that parses writes itself back in a
// form that parses to the same condition.
func FuzzParseCondition(f *testing.F) {
	for _, s := range []string{"trits", "scale=0.01", "rel_rmse=1e-3", "cosine=", "zero_fraction=-1", "any=1", " kind ", "scale=NaN"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		c, err := ParseCondition(s)
		if err != nil {
			require.ErrorIs(t, err, ErrCondition)
			return
		}
		again, err := ParseCondition(c.String())
		require.NoError(t, err)
		require.Equal(t, c, again)
	})
}

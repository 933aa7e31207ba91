package verify

import (
	"bytes"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/testweights"
	"ternkit/pack"
)

// fixture writes a small checkpoint (two ternary tensors, one kept) and
// its artifact, returning both paths.
func fixture(t testing.TB, dir string, codec pack.Codec, edit func(name string, v []float32)) (src, art string) {
	return fixtureWith(t, dir, codec, nil, edit)
}

// mixedPolicy exercises every kind of section: trits with one scale, trits
// with a scales section, int8 codes with scales, a converted kept tensor.
func mixedPolicy(t testing.TB) *convert.Policy {
	p := &convert.Policy{}
	for _, s := range []string{"*.q.weight=ternary:row", "*.down.weight=int8", "*norm*=keep:f16"} {
		r, err := convert.ParseRule(s)
		if err != nil {
			t.Fatal(err)
		}
		p.Rules = append(p.Rules, r)
	}
	return p
}

func fixtureWith(t testing.TB, dir string, codec pack.Codec, policy *convert.Policy, edit func(name string, v []float32)) (src, art string) {
	rng := rand.New(rand.NewPCG(5, 6))
	shapes := []struct {
		name  string
		shape []int64
	}{
		{"blocks.0.attn.q.weight", []int64{6, 10}},
		{"blocks.0.norm.weight", []int64{10}},
		{"blocks.0.mlp.down.weight", []int64{10, 7}},
	}
	var tensors []convert.WriteTensor
	for _, s := range shapes {
		n := int64(1)
		for _, d := range s.shape {
			n *= d
		}
		v := testweights.Gaussian(rng, int(n))
		if edit != nil {
			edit(s.name, v)
		}
		b := testweights.F32Bytes(v)
		tensors = append(tensors, convert.WriteTensor{Name: s.name, DType: "F32", Shape: s.shape, Data: b})
	}
	src = filepath.Join(dir, "src.safetensors")
	if err := convert.WriteFile(src, tensors, nil); err != nil {
		t.Fatal(err)
	}
	art = filepath.Join(dir, "a.tkart")
	s, err := convert.Open(src)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	if _, err := pack.Build(s, art, pack.Options{Codec: codec, Recipe: convert.DefaultRecipe(), Policy: policy}); err != nil {
		t.Fatal(err)
	}
	return src, art
}

func runAgainst(t *testing.T, art, src string) *Report {
	t.Helper()
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	rep, err := Run(art, Options{Source: s})
	require.NoError(t, err)
	return rep
}

func TestVerifyPasses(t *testing.T) {
	for _, codec := range pack.Codecs {
		t.Run(string(codec), func(t *testing.T) {
			src, art := fixture(t, t.TempDir(), codec, nil)
			rep, err := Run(art, Options{})
			require.NoError(t, err)
			require.True(t, rep.OK(), "%+v", rep.Failures())
			rep = runAgainst(t, art, src)
			require.True(t, rep.OK(), "%+v", rep.Failures())
			names := map[string]bool{}
			for _, c := range rep.Checks {
				names[c.Name] = true
			}
			for _, want := range []string{CheckStructure, CheckSection, CheckPadding, CheckDecode,
				CheckSourceHash, CheckRequantize, CheckKept, CheckSourceFile, CheckBound} {
				require.True(t, names[want], "check %s ran", want)
			}
		})
	}
}

func TestVerifyPassesMixedPolicy(t *testing.T) {
	src, art := fixtureWith(t, t.TempDir(), pack.Base3, mixedPolicy(t), nil)
	rep := runAgainst(t, art, src)
	require.True(t, rep.OK(), "%+v", rep.Failures())
	c, ok := rep.Find(CheckBound, "")
	require.True(t, ok)
	require.Contains(t, c.Detail, "holds")
	require.Contains(t, c.Detail, "closest to it: tensor")
	for _, name := range []string{"blocks.0.attn.q.weight", "blocks.0.mlp.down.weight"} {
		c, ok := rep.Find(CheckRequantize, name)
		require.True(t, ok, name)
		require.True(t, c.OK, name)
	}
	c, ok = rep.Find(CheckKept, "blocks.0.norm.weight")
	require.True(t, ok)
	require.True(t, c.OK)
}

// Every byte of the artifact is covered by a hash or a structural rule:
// flipping any bit of any byte fails verification, and the failure names
// the structure or section at fault, with a byte offset.
func TestVerifyCatchesEveryBit(t *testing.T) {
	dir := t.TempDir()
	_, art := fixtureWith(t, dir, pack.Bits2, mixedPolicy(t), nil)
	good, err := os.ReadFile(art)
	require.NoError(t, err)
	b := append([]byte(nil), good...)
	for i := range good {
		for bit := 0; bit < 8; bit++ {
			b[i] ^= 1 << bit
			rep, err := RunReaderAt("bad.tkart", bytes.NewReader(b), int64(len(b)), Options{})
			b[i] ^= 1 << bit
			require.NoError(t, err)
			require.False(t, rep.OK(), "byte %d bit %d passed", i, bit)
			f := rep.Failures()[0]
			require.Contains(t, []string{CheckStructure, CheckSection, CheckPadding}, f.Name, "byte %d bit %d", i, bit)
			require.Contains(t, f.Detail, "byte ", "byte %d bit %d: %s", i, bit, f.Detail)
		}
	}
}

// Truncated anywhere, an artifact never passes and never panics.
func TestVerifyTruncatedEverywhere(t *testing.T) {
	dir := t.TempDir()
	_, art := fixtureWith(t, dir, pack.Base3, mixedPolicy(t), nil)
	good, err := os.ReadFile(art)
	require.NoError(t, err)
	for n := 0; n < len(good); n++ {
		rep, err := RunReaderAt("bad.tkart", bytes.NewReader(good[:n]), int64(n), Options{})
		require.NoError(t, err)
		require.False(t, rep.OK(), "truncated to %d passed", n)
	}
}

// A source with one element changed is reported as a different source for
// that tensor, by name.
func TestVerifyAgainstChangedSource(t *testing.T) {
	dir := t.TempDir()
	_, art := fixture(t, dir, pack.Base3, nil)
	other := t.TempDir()
	src2, _ := fixture(t, other, pack.Base3, func(name string, v []float32) {
		if name == "blocks.0.mlp.down.weight" {
			v[3] += 0.5
		}
	})
	rep := runAgainst(t, art, src2)
	require.False(t, rep.OK())
	var failed []string
	for _, c := range rep.Failures() {
		failed = append(failed, c.Name+":"+c.Tensor)
	}
	require.Contains(t, failed, CheckSourceHash+":blocks.0.mlp.down.weight")
	require.Contains(t, failed, CheckSourceFile+":")
	for _, f := range failed {
		require.False(t, strings.Contains(f, "attn.q"), "unchanged tensor reported: %s", f)
	}
}

func TestVerifyMissingArtifact(t *testing.T) {
	_, err := Run(filepath.Join(t.TempDir(), "none.tkart"), Options{})
	require.ErrorIs(t, err, os.ErrNotExist)
}

package pack

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
	"ternkit/internal/testweights"
	"ternkit/manifest"
)

// testSource writes a small mixed checkpoint and returns its path and the
// float values of its ternary tensors.
func testSource(t *testing.T, dir string) (string, map[string][]float32) {
	t.Helper()
	rng := rand.New(rand.NewPCG(11, 12))
	q := testweights.Gaussian(rng, 8*16)
	up := testweights.Gaussian(rng, 5*7)
	tensors := []convert.WriteTensor{
		{Name: "embed.tokens.weight", DType: "F32", Shape: []int64{10, 4}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 40))},
		{Name: "blocks.0.attn.q.weight", DType: "F32", Shape: []int64{8, 16}, Data: testweights.F32Bytes(q)},
		{Name: "blocks.0.norm.weight", DType: "BF16", Shape: []int64{16}, Data: make([]byte, 32)},
		{Name: "blocks.0.mlp.up.weight", DType: "F32", Shape: []int64{5, 7}, Data: testweights.F32Bytes(up)},
		{Name: "step", DType: "I64", Shape: []int64{}, Data: []byte{7, 0, 0, 0, 0, 0, 0, 0}},
		{Name: "empty", DType: "F32", Shape: []int64{0, 3}, Data: nil},
	}
	path := filepath.Join(dir, "src.safetensors")
	require.NoError(t, convert.WriteFile(path, tensors, map[string]string{"purpose": "pack test"}))
	return path, map[string][]float32{"blocks.0.attn.q.weight": q, "blocks.0.mlp.up.weight": up, "empty": {}}
}

func buildArtifact(t *testing.T, src, dst string, codec Codec) *manifest.Manifest {
	t.Helper()
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	m, err := Build(s, dst, Options{Codec: codec, Recipe: convert.DefaultRecipe(), Tool: "ternkit test"})
	require.NoError(t, err)
	return m
}

func TestBuildAndRead(t *testing.T) {
	for _, codec := range Codecs {
		t.Run(string(codec), func(t *testing.T) {
			dir := t.TempDir()
			src, floats := testSource(t, dir)
			dst := filepath.Join(dir, "out"+Extension)
			m := buildArtifact(t, src, dst, codec)
			require.Equal(t, 6, m.Totals.Tensors)
			require.Equal(t, 3, m.Totals.TernaryTensors, "the 2-D float tensors but the embedding")

			a, err := Open(dst)
			require.NoError(t, err)
			defer a.Close()
			st, err := os.Stat(dst)
			require.NoError(t, err)
			require.Equal(t, st.Size(), a.Size())
			require.Zero(t, a.ManifestOffset()%Align)
			require.Equal(t, "pack test", a.Manifest().Source.Metadata["purpose"])

			for _, e := range a.Tensors() {
				require.Zero(t, e.Section.Offset%Align, e.Name)
				tn, err := a.Tensor(e.Name)
				require.NoError(t, err)
				w, ok := floats[e.Name]
				if !ok {
					require.NotEqual(t, manifest.KindTernary, e.Kind, e.Name)
					err := tn.DecodeTrits(make([]int8, tn.Len()))
					require.ErrorIs(t, err, ErrKind)
					continue
				}
				want := make([]int8, len(w))
				q, err := convert.Ternarize(w, convert.Columns(e.Shape), convert.PerTensor, convert.DefaultRecipe(), want)
				require.NoError(t, err)
				require.Equal(t, q.Scales[0], e.Scale)
				got := make([]int8, tn.Len())
				require.NoError(t, tn.DecodeTrits(got))
				require.Equal(t, want, got)
				deq := make([]float32, tn.Len())
				require.NoError(t, tn.DecodeFloat32(deq))
				for i := range deq {
					require.Equal(t, q.Scales[0]*float32(want[i]), deq[i])
				}
			}
			_, err = a.Tensor("missing")
			require.ErrorIs(t, err, ErrNoTensor)
		})
	}
}

// Kept tensors come back byte for byte.
func TestBuildKeepsBytes(t *testing.T) {
	dir := t.TempDir()
	src, _ := testSource(t, dir)
	dst := filepath.Join(dir, "out"+Extension)
	buildArtifact(t, src, dst, Base3)
	a, err := Open(dst)
	require.NoError(t, err)
	defer a.Close()
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	require.NoError(t, s.Walk(func(st *convert.Tensor, raw []byte, _ [32]byte) error {
		tn, err := a.Tensor(st.Name)
		require.NoError(t, err)
		if tn.Entry.Kind == manifest.KindKept {
			p, err := tn.Payload()
			require.NoError(t, err)
			require.Equal(t, raw, p, st.Name)
		}
		return nil
	}))
}

// Same source and options give the same bytes.
func TestBuildDeterministic(t *testing.T) {
	dir := t.TempDir()
	src, _ := testSource(t, dir)
	a, b := filepath.Join(dir, "a"+Extension), filepath.Join(dir, "b"+Extension)
	buildArtifact(t, src, a, Base3)
	buildArtifact(t, src, b, Base3)
	ab, err := os.ReadFile(a)
	require.NoError(t, err)
	bb, err := os.ReadFile(b)
	require.NoError(t, err)
	require.Equal(t, ab, bb)
}

func TestBuildNonFiniteLeavesNothing(t *testing.T) {
	dir := t.TempDir()
	w := []float32{1, 2, float32(math.NaN()), 4}
	src := filepath.Join(dir, "nan.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "blocks.0.w", DType: "F32", Shape: []int64{2, 2}, Data: testweights.F32Bytes(w)},
	}, nil))
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	dst := filepath.Join(dir, "out"+Extension)
	_, err = Build(s, dst, Options{Codec: Bits2, Recipe: convert.DefaultRecipe()})
	require.ErrorIs(t, err, convert.ErrNonFinite)
	var ie *convert.InputError
	require.True(t, errors.As(err, &ie))
	require.Equal(t, "blocks.0.w", ie.Tensor)
	require.Equal(t, s.Tensors[0].Offset+2*4, ie.Offset, "offset of element 2")
	require.Contains(t, err.Error(), src)
	entries, err := os.ReadDir(dir)
	require.NoError(t, err)
	require.Len(t, entries, 1, "only the source remains: no artifact, no temp file")
}

func TestOpenRejects(t *testing.T) {
	dir := t.TempDir()
	src, _ := testSource(t, dir)
	dst := filepath.Join(dir, "out"+Extension)
	buildArtifact(t, src, dst, Bits2)
	good, err := os.ReadFile(dst)
	require.NoError(t, err)
	size := len(good)
	tr := size - TrailerLen
	cases := []struct {
		name string
		edit func(b []byte) []byte
		want error
	}{
		{"magic", func(b []byte) []byte { b[0] = 'X'; return b }, ErrNotArtifact},
		{"major version", func(b []byte) []byte { b[8] = 2; return b }, ErrVersion},
		{"flags", func(b []byte) []byte { b[12] = 1; return b }, ErrStructure},
		{"reserved preamble", func(b []byte) []byte { b[40] = 1; return b }, ErrStructure},
		{"trailer magic", func(b []byte) []byte { b[size-1] ^= 1; return b }, ErrStructure},
		{"trailer reserved", func(b []byte) []byte { b[tr+50] = 1; return b }, ErrStructure},
		{"manifest offset", func(b []byte) []byte { b[tr] += 64; return b }, ErrStructure},
		{"manifest length", func(b []byte) []byte { b[tr+8]++; return b }, ErrStructure},
		{"manifest hash", func(b []byte) []byte { b[tr+16] ^= 0x80; return b }, ErrHash},
		{"manifest byte", func(b []byte) []byte { b[tr-2] ^= 0x20; return b }, ErrHash},
		{"truncated", func(b []byte) []byte { return b[:size-1] }, ErrStructure},
		{"too short", func(b []byte) []byte { return b[:100] }, ErrStructure},
		{"appended", func(b []byte) []byte { return append(b, 0) }, ErrStructure},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			b := c.edit(bytes.Clone(good))
			_, err := NewReader(bytes.NewReader(b), int64(len(b)))
			require.ErrorIs(t, err, c.want)
			var fe *FormatError
			require.True(t, errors.As(err, &fe))
			require.Contains(t, err.Error(), "byte ")
		})
	}
}

func FuzzOpen(f *testing.F) {
	dir := f.TempDir()
	rng := rand.New(rand.NewPCG(1, 1))
	src := filepath.Join(dir, "src.safetensors")
	if err := convert.WriteFile(src, []convert.WriteTensor{
		{Name: "w", DType: "F32", Shape: []int64{3, 5}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 15))},
		{Name: "b", DType: "F16", Shape: []int64{2}, Data: []byte{0, 0x3c, 0, 0xc0}},
	}, nil); err != nil {
		f.Fatal(err)
	}
	s, err := convert.Open(src)
	if err != nil {
		f.Fatal(err)
	}
	dst := filepath.Join(dir, "a"+Extension)
	if _, err := Build(s, dst, Options{Codec: Base3, Recipe: convert.DefaultRecipe(),
		PolicyRules: []string{"ternary *"}, Created: time.Unix(1_700_000_000, 0)}); err != nil {
		f.Fatal(err)
	}
	s.Close()
	good, err := os.ReadFile(dst)
	if err != nil {
		f.Fatal(err)
	}
	f.Add(good)
	f.Add(good[:len(good)-1])
	f.Add(make([]byte, 128))
	vectors, _ := filepath.Glob(filepath.Join(vectorsDir, "*"+Extension))
	for _, v := range vectors {
		if b, err := os.ReadFile(v); err == nil {
			f.Add(b)
		}
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		a, err := readBounded(t, b)
		if err != nil {
			return
		}
		_ = a.Check()
		for _, e := range a.Tensors() {
			tn, err := a.Tensor(e.Name)
			if err != nil {
				t.Fatal(err)
			}
			decodeBounded(t, tn)
		}
	})
}

func mustPolicy(t *testing.T, rules ...string) *convert.Policy {
	t.Helper()
	p := &convert.Policy{}
	for _, s := range rules {
		r, err := convert.ParseRule(s)
		require.NoError(t, err)
		p.Rules = append(p.Rules, r)
	}
	return p
}

// An already-ternary checkpoint (each group exactly c × {-1, 0, +1})
// round-trips with error exactly 0 at every granularity; the other actions
// come back within their own bounds.
func TestBuildActionsRoundTrip(t *testing.T) {
	rng := rand.New(rand.NewPCG(31, 32))
	const rows, cols = 12, 32
	ternaryLike := func(groupSize int) []float32 {
		w := make([]float32, rows*cols)
		for k := 0; k < len(w)/groupSize; k++ {
			c := float32(0.01 + 0.01*rng.Float64())
			for i := k * groupSize; i < (k+1)*groupSize; i++ {
				w[i] = c * float32(rng.IntN(3)-1)
			}
			w[k*groupSize] = -c
		}
		return w
	}
	exact := map[string][]float32{
		"exact.tensor": ternaryLike(rows * cols),
		"exact.row":    ternaryLike(cols),
		"exact.group":  ternaryLike(8),
	}
	embed := testweights.Gaussian(rng, rows*cols)
	norm := testweights.Gaussian(rng, cols)
	f64 := make([]byte, 8*cols)
	f64vals := make([]float64, cols)
	for i := range f64vals {
		f64vals[i] = rng.NormFloat64()
		binary.LittleEndian.PutUint64(f64[8*i:], math.Float64bits(f64vals[i]))
	}
	dir := t.TempDir()
	src := filepath.Join(dir, "src.safetensors")
	shape := []int64{rows, cols}
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "exact.tensor", DType: "F32", Shape: shape, Data: testweights.F32Bytes(exact["exact.tensor"])},
		{Name: "exact.row", DType: "F32", Shape: shape, Data: testweights.F32Bytes(exact["exact.row"])},
		{Name: "exact.group", DType: "F32", Shape: shape, Data: testweights.F32Bytes(exact["exact.group"])},
		{Name: "embed", DType: "F32", Shape: shape, Data: testweights.F32Bytes(embed)},
		{Name: "norm", DType: "F32", Shape: []int64{cols}, Data: testweights.F32Bytes(norm)},
		{Name: "wide", DType: "F64", Shape: []int64{cols}, Data: f64},
		{Name: "step", DType: "I64", Shape: []int64{}, Data: make([]byte, 8)},
	}, nil))
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	dst := filepath.Join(dir, "out"+Extension)
	policy := mustPolicy(t, "exact.tensor=ternary", "exact.row=ternary:row", "exact.group=ternary:group:8",
		"embed=int8", "norm=keep:f16", "wide=keep:f32", "*=ternary")
	m, err := Build(s, dst, Options{Codec: Base3, Recipe: convert.DefaultRecipe(), Policy: policy})
	require.NoError(t, err)
	require.Equal(t, 3, m.Totals.TernaryTensors)
	require.Equal(t, 1, m.Totals.Int8Tensors)

	a, err := Open(dst)
	require.NoError(t, err)
	defer a.Close()
	get := func(name string) (*Tensor, []float32) {
		tn, err := a.Tensor(name)
		require.NoError(t, err)
		v := make([]float32, tn.Len())
		require.NoError(t, tn.DecodeFloat32(v))
		return tn, v
	}
	for name, w := range exact {
		tn, got := get(name)
		require.True(t, tn.Entry.Exact, name)
		require.Zero(t, tn.Entry.Stats.MaxAbsErr, name)
		require.Equal(t, w, got, name)
	}
	tn, got := get("embed")
	require.Equal(t, manifest.KindInt8, tn.Entry.Kind)
	for r := 0; r < rows; r++ {
		var absmax float64
		for _, v := range embed[r*cols : (r+1)*cols] {
			absmax = math.Max(absmax, math.Abs(float64(v)))
		}
		for i := r * cols; i < (r+1)*cols; i++ {
			// absmax int8: half a step, absmax/254 (common practice)
			require.LessOrEqual(t, math.Abs(float64(embed[i]-got[i])), absmax/254*(1+convert.Int8BoundTolerance))
		}
	}
	tn, got = get("norm")
	require.Equal(t, "F16", tn.Entry.DType)
	for i, v := range norm {
		require.Equal(t, convert.F16ToFloat32(convert.Float32ToF16(v)), got[i])
	}
	tn, got = get("wide")
	require.Equal(t, "F32", tn.Entry.DType)
	for i, v := range f64vals {
		require.Equal(t, float32(v), got[i]) // Go's conversion rounds to nearest even
	}
	tn, err = a.Tensor("step")
	require.NoError(t, err)
	require.Equal(t, manifest.KindKept, tn.Entry.Kind, "integers are kept whatever the rules say")
	require.ErrorIs(t, tn.DecodeFloat32(make([]float32, 1)), convert.ErrDType)
}

// A rule a tensor cannot take fails before anything is written.
func TestBuildPolicyErrorLeavesNothing(t *testing.T) {
	dir := t.TempDir()
	src, _ := testSource(t, dir)
	s, err := convert.Open(src)
	require.NoError(t, err)
	defer s.Close()
	dst := filepath.Join(dir, "out"+Extension)
	_, err = Build(s, dst, Options{Codec: Base3, Recipe: convert.DefaultRecipe(), Policy: mustPolicy(t, "*norm*=ternary")})
	require.ErrorIs(t, err, convert.ErrPolicy)
	require.Contains(t, err.Error(), `"blocks.0.norm.weight"`)
	require.Contains(t, err.Error(), "*norm* = ternary")
	_, err = os.Stat(dst)
	require.ErrorIs(t, err, os.ErrNotExist)
	entries, err := os.ReadDir(dir)
	require.NoError(t, err)
	require.Len(t, entries, 1)
}

// A large tensor kept as it is, handed over in pieces and written as they
// come, gives the bytes of a build that takes it whole: pieces of a length
// that is no multiple of the 4 MiB hash pieces, a tensor of 9 MiB and a
// little (so three hash pieces, the last short), beside quantized tensors,
// and the artifact reads back with the tensor's bytes.
func TestBuildKeptTensorInPieces(t *testing.T) {
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(31, 32))
	big := make([]byte, 9<<20+12345)
	for i := range big {
		big[i] = byte(rng.Uint32())
	}
	src := filepath.Join(dir, "src.safetensors")
	require.NoError(t, convert.WriteFile(src, []convert.WriteTensor{
		{Name: "blocks.0.attn.q.weight", DType: "F32", Shape: []int64{8, 16}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 128))},
		{Name: "embed.tokens.weight", DType: "U8", Shape: []int64{int64(len(big))}, Data: big},
		{Name: "blocks.1.attn.q.weight", DType: "F32", Shape: []int64{8, 16}, Data: testweights.F32Bytes(testweights.Gaussian(rng, 128))},
	}, nil))
	whole := filepath.Join(dir, "whole"+Extension)
	buildWith(t, src, whole, Options{})
	defer func(n int64) { keptPieceSize = n }(keptPieceSize)
	keptPieceSize = 3<<20 + 7
	for _, workers := range []int{1, 2} {
		pieces := filepath.Join(dir, fmt.Sprintf("pieces-%d%s", workers, Extension))
		buildWith(t, src, pieces, Options{Workers: workers, Budget: 1})
		require.True(t, bytes.Equal(readFile(t, whole), readFile(t, pieces)), "workers %d", workers)
	}
	a, err := Open(whole)
	require.NoError(t, err)
	defer a.Close()
	tn, err := a.Tensor("embed.tokens.weight")
	require.NoError(t, err)
	require.Len(t, tn.Entry.Section.PieceCVs, 3)
	require.Empty(t, tn.Entry.Section.Chunks)
	got, err := tn.Payload()
	require.NoError(t, err)
	require.True(t, bytes.Equal(big, got))
	require.NoError(t, a.Check())
}

package probe

import (
	"errors"
	"fmt"
	"math"
	"path/filepath"
	"strings"
	"testing"

	"ternkit/convert"
	"ternkit/pack"
)

func near(t *testing.T, what string, got, want, tol float64) {
	t.Helper()
	if math.Abs(got-want) > tol {
		t.Errorf("%s: %.9g, want %.9g (±%g)", what, got, want, tol)
	}
}

// TestRMSNormHandWorked: RMSNorm(x) = x / sqrt(mean(x²) + eps) · g (Zhang &
// Sennrich 2019). x = (3, 4), eps = 0: mean(x²) = 12.5, sqrt = 3.5355339;
// with g = (1, 2): (0.84852814, 2.2627417).
func TestRMSNormHandWorked(t *testing.T) {
	x := []float32{3, 4}
	RMSNorm(x, []float32{1, 2}, 0)
	near(t, "x0", float64(x[0]), 0.84852814, 1e-6)
	near(t, "x1", float64(x[1]), 2.2627417, 1e-6)
}

// TestRopeHandWorked: rotary embedding (Su et al. 2021) with the
// rotate-half pairing, d = 4, theta = 10000, position 1: pair (0, 2) turns
// by 1 rad, pair (1, 3) by 10000^(−1/2) = 0.01 rad. v = (1, 1, 0, 0):
// (cos 1, cos 0.01, sin 1, sin 0.01) = (0.54030231, 0.99995, 0.84147098,
// 0.0099998333). Position 0 leaves v unchanged.
func TestRopeHandWorked(t *testing.T) {
	v := []float32{1, 1, 0, 0}
	Rope(v, 1, 10000)
	for i, want := range []float64{0.54030231, 0.99995, 0.84147098, 0.0099998333} {
		near(t, "v", float64(v[i]), want, 1e-6)
	}
	w := []float32{0.5, -2, 3, 7}
	Rope(w, 0, 10000)
	if w[0] != 0.5 || w[1] != -2 || w[2] != 3 || w[3] != 7 {
		t.Errorf("position 0 changed the vector: %v", w)
	}
}

// TestActHandWorked: the gated MLP's activations (Shazeer 2020, GLU
// variants): silu(1) = 1/(1+e⁻¹) = 0.73105858; gelu in tanh form,
// gelu(1) = 0.5·(1 + tanh(sqrt(2/π)·1.044715)) = 0.84119199; relu²(3) = 9,
// relu²(−2) = 0.
func TestActHandWorked(t *testing.T) {
	for _, c := range []struct {
		act     string
		in, out float64
	}{{"silu", 1, 0.73105858}, {"silu", -1, -0.26894142}, {"gelu", 1, 0.84119199}, {"gelu_pytorch_tanh", -1, -0.15880801},
		{"relu2", 3, 9}, {"relu2", -2, 0}} {
		x := []float32{float32(c.in)}
		Act(c.act, x)
		near(t, c.act, float64(x[0]), c.out, 1e-6)
	}
}

// TestQuantizeInt8HandWorked: per-token absmax 8-bit activations
// (Dettmers et al. 2022; the ternary method's paper): s = 127 / max|x|,
// q = clip(round(x·s), −128, 127). x = (0.5, −1, 0.25, 0.0039): s = 127,
// x·s = (63.5, −127, 31.75, 0.4953) → (64, −127, 32, 0); 63.5 is a tie
// and rounds to the even 64 (half away from zero gives 64 too). x =
// (0.45, 12.7) has s = 10 and x·s = 4.5 in float32, a tie: half to even
// gives 4 (half away from zero would give 5), and 127.
func TestQuantizeInt8HandWorked(t *testing.T) {
	for _, c := range []struct {
		x []float32
		s float32
		q []int8
	}{
		{[]float32{0.5, -1, 0.25, 0.0039}, 127, []int8{64, -127, 32, 0}},
		{[]float32{0.45, 12.7}, 10, []int8{4, 127}},
		{[]float32{0, 0}, 0, []int8{0, 0}},
		{[]float32{1e-40, -1e-41}, 0, []int8{0, 0}}, // 127 / 1e-40 overflows float32
	} {
		q := make([]int8, len(c.x))
		s := QuantizeInt8(q, c.x)
		if s != c.s || string(toBytes(q)) != string(toBytes(c.q)) {
			t.Errorf("%v: s %v q %v, want s %v q %v", c.x, s, q, c.s, c.q)
		}
	}
}

func toBytes(q []int8) []byte {
	b := make([]byte, len(q))
	for i, v := range q {
		b[i] = byte(v)
	}
	return b
}

func TestTopK(t *testing.T) {
	got := TopK([]float32{1, 5, 3, 5, -1, 4}, 3)
	if len(got) != 3 || got[0] != 1 || got[1] != 3 || got[2] != 5 {
		t.Errorf("TopK: %v, want [1 3 5]", got)
	}
}

var smallModel = tinyModel{hidden: 32, inter: 48, layers: 2, heads: 4, kv: 2, headDim: 8, vocab: 64, seed: 1}

// TestExactTernaryModel: a model whose projections are exactly
// c × {−1, 0, +1} packs losslessly, so with float activations the artifact
// computes what the source computes: top-1 agreement 100%, KL ≈ 0.
func TestExactTernaryModel(t *testing.T) {
	m := smallModel
	m.exact = true
	src := m.write(t, t.TempDir())
	art := packModel(t, src, pack.Base3)
	seqs := RandomTokens(2, 16, m.vocab, 1)
	res := probeBoth(t, m, art, src, ActFloat, seqs)
	if res.Top1 != 1 || res.MaxKL > 1e-9 || res.Top5 != 1 {
		t.Errorf("exact model, float activations: top-1 %v, top-5 %v, max KL %g; want 1, 1, ≈0", res.Top1, res.Top5, res.MaxKL)
	}
	for _, l := range res.Layers {
		if l.Cosine < 1-1e-9 || l.RelL2 > 1e-6 {
			t.Errorf("layer %d: cosine %v rel L2 %v", l.Layer, l.Cosine, l.RelL2)
		}
	}
	// int8 activations: close, not equal
	res8 := probeBoth(t, m, art, src, ActInt8, seqs)
	t.Logf("exact model: float activations top-1 %.3f KL %.2g; int8 activations top-1 %.3f mean KL %.3g max KL %.3g",
		res.Top1, res.MaxKL, res8.Top1, res8.MeanKL, res8.MaxKL)
	if res8.MaxKL == 0 {
		t.Error("int8 activations gave KL 0 exactly: the activations were not quantized")
	}
}

// TestGaussianModelDrops: post-training ternarization of Gaussian weights
// shows the large drop the cautions warn about.
func TestGaussianModelDrops(t *testing.T) {
	m := smallModel
	src := m.write(t, t.TempDir())
	art := packModel(t, src, pack.Bits2)
	res := probeBoth(t, m, art, src, ActInt8, RandomTokens(2, 32, m.vocab, 1))
	t.Logf("gaussian model, int8 activations: top-1 %.3f top-5 %.3f mean KL %.3f max KL %.3f; last layer cosine %.4f rel L2 %.4f",
		res.Top1, res.Top5, res.MeanKL, res.MaxKL, res.Layers[len(res.Layers)-1].Cosine, res.Layers[len(res.Layers)-1].RelL2)
	if res.Top1 > 0.9 || res.MeanKL < 0.01 {
		t.Errorf("gaussian post-training ternary: top-1 %v mean KL %v; expected a clear drop", res.Top1, res.MeanKL)
	}
}

func TestPlaceErrors(t *testing.T) {
	m := smallModel
	src := m.write(t, t.TempDir())
	sw, err := OpenSource(src)
	if err != nil {
		t.Fatal(err)
	}
	defer sw.Close()
	// a config with one layer more than the weights
	m2 := m
	m2.layers = 3
	err = m2.arch(t).Place(sw)
	if !errors.Is(err, ErrLayout) || !strings.Contains(err.Error(), `"model.layers.2.self_attn.q_proj.weight" is missing`) {
		t.Errorf("missing layer: %v", err)
	}
	// a config with one layer fewer: the last layer's tensors have no place
	m2.layers = 1
	err = m2.arch(t).Place(sw)
	if !errors.Is(err, ErrLayout) || !strings.Contains(err.Error(), "has no place") {
		t.Errorf("extra layer: %v", err)
	}
	// a wrong width
	m2 = m
	m2.inter = 40
	if err := m2.arch(t).Place(sw); !errors.Is(err, ErrLayout) || !strings.Contains(err.Error(), "shape [48 32], the config gives [40 32]") {
		t.Errorf("wrong width: %v", err)
	}
	if err := m.arch(t).Place(sw); err != nil {
		t.Errorf("the right config: %v", err)
	}
}

func TestTokens(t *testing.T) {
	seqs, err := ParseTokens("t.txt", strings.NewReader("# ids\n1 2 3\n\n4,5\n"))
	if err != nil || len(seqs) != 2 || len(seqs[0]) != 3 || seqs[1][1] != 5 {
		t.Fatalf("%v %v", seqs, err)
	}
	for _, bad := range []string{"1 x 3\n", "-1\n", "", "# only\n"} {
		if _, err := ParseTokens("t.txt", strings.NewReader(bad)); !errors.Is(err, ErrTokens) {
			t.Errorf("%q: %v", bad, err)
		}
	}
	a := smallModel.arch(t)
	if _, err := Start(a, nil, [][]int32{{1, 64}}); !errors.Is(err, ErrTokens) || !strings.Contains(err.Error(), "id 64") {
		t.Errorf("id past the vocabulary: %v", err)
	}
	r1, r2 := RandomTokens(2, 5, 64, 9), RandomTokens(2, 5, 64, 9)
	if len(r1) != 2 || len(r1[1]) != 5 || r1[1][4] != r2[1][4] {
		t.Errorf("random tokens not reproducible: %v %v", r1, r2)
	}
}

// TestGoldenRoundTrip: a golden file written from a run checks against
// the same run, and fails on a changed logit.
func TestGoldenRoundTrip(t *testing.T) {
	m := smallModel
	src := m.write(t, t.TempDir())
	art := packModel(t, src, pack.Base3, "model.layers.*.mlp.*=ternary:group:16")
	seqs := RandomTokens(1, 8, m.vocab, 3)
	res := probeBoth(t, m, art, src, ActInt8, seqs)
	g := NewGolden(res, seqs, m.vocab, 5, Tolerance{Abs: 1e-4, Rel: 1e-4}, "aa", "bb")
	data, err := g.Marshal()
	if err != nil {
		t.Fatal(err)
	}
	g2, err := ParseGolden("g.json", data)
	if err != nil {
		t.Fatal(err)
	}
	if n, err := g2.Check(res.Logits, m.vocab); err != nil || n != 8 {
		t.Fatalf("check against itself: %d positions, %v", n, err)
	}
	bad := append([]float32(nil), res.Logits...)
	bad[3*m.vocab+int(g2.Positions[0][3].IDs[2])] += 0.01
	if _, err := g2.Check(bad, m.vocab); !errors.Is(err, ErrGolden) || !strings.Contains(err.Error(), "position 3") {
		t.Errorf("changed logit: %v", err)
	}
	if _, err := ParseGolden("g.json", []byte(`{"format":"x"}`)); err == nil {
		t.Error("wrong format accepted")
	}
}

// TestSourceNonFinite: a NaN or infinity in a source block is an error
// naming the tensor and the element's byte offset in the file.
func TestSourceNonFinite(t *testing.T) {
	path := filepath.Join(t.TempDir(), "bad.safetensors")
	v := make([]float32, 3*blockElems)
	v[2*blockElems+5] = float32(math.Inf(-1))
	data, err := convert.EncodeFloat32(nil, "F32", v)
	if err != nil {
		t.Fatal(err)
	}
	if err := convert.WriteFile(path, []convert.WriteTensor{{Name: "w", DType: "F32", Shape: []int64{3 * blockElems, 1}, Data: data}}, nil); err != nil {
		t.Fatal(err)
	}
	sw, err := OpenSource(path)
	if err != nil {
		t.Fatal(err)
	}
	defer sw.Close()
	_, err = sw.Linear("w", []float32{1}, 1)
	want := fmt.Sprintf("byte %d", sw.byName["w"].Offset+4*int64(2*blockElems+5))
	if !errors.Is(err, convert.ErrNonFinite) || !strings.Contains(err.Error(), want) {
		t.Errorf("%v, want ErrNonFinite at %s", err, want)
	}
}

// TestCodecsSameLogits: the codec changes the bytes, never the model: an
// artifact packed bits2, base3 and entropy gives the same logits.
func TestCodecsSameLogits(t *testing.T) {
	m := smallModel
	m.seed = 5
	seqs := RandomTokens(1, 10, m.vocab, 2)
	var first []float32
	for _, codec := range []pack.Codec{pack.Bits2, pack.Base3, pack.Entropy} {
		src := m.write(t, t.TempDir())
		res := probeBoth(t, m, packModel(t, src, codec, "model.layers.*.mlp.*_proj.weight=ternary:group:8"), src, ActInt8, seqs)
		if first == nil {
			first = res.Logits
			continue
		}
		for i := range first {
			if first[i] != res.Logits[i] {
				t.Fatalf("%s: logit %d is %v, bits2 gave %v", codec, i, res.Logits[i], first[i])
			}
		}
	}
}

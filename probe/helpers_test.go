package probe

import (
	"fmt"
	"math/rand/v2"
	"path/filepath"
	"testing"

	"ternkit/convert"
	"ternkit/modelconfig"
	"ternkit/pack"
)

// tinyModel describes a small random model for the tests.
type tinyModel struct {
	hidden, inter, layers, heads, kv, headDim, vocab int
	tied, biases, innerNorms                         bool
	exact                                            bool // 2-D projections are c × {−1, 0, +1}
	act                                              string
	seed                                             uint64
}

func (m tinyModel) config() []byte {
	act := m.act
	if act == "" {
		act = "silu"
	}
	return fmt.Appendf(nil, `{"hidden_size": %d, "intermediate_size": %d, "num_hidden_layers": %d,
 "num_attention_heads": %d, "num_key_value_heads": %d, "head_dim": %d, "vocab_size": %d,
 "rope_theta": 10000.0, "rms_norm_eps": 1e-5, "hidden_act": %q, "tie_word_embeddings": %v,
 "max_position_embeddings": 256}`, m.hidden, m.inter, m.layers, m.heads, m.kv, m.headDim, m.vocab, act, m.tied)
}

func (m tinyModel) arch(t testing.TB) *Arch {
	c, err := modelconfig.Parse("config.json", m.config())
	if err != nil {
		t.Fatal(err)
	}
	a, err := NewArch(c)
	if err != nil {
		t.Fatal(err)
	}
	return a
}

// write writes the model's F32 checkpoint (and an I64 step counter) to
// dir/model.safetensors and returns its path.
func (m tinyModel) write(t testing.TB, dir string) string {
	rng := rand.New(rand.NewPCG(m.seed, 77))
	var tensors []convert.WriteTensor
	add := func(name string, shape []int64, v []float32) {
		data, err := convert.EncodeFloat32(nil, "F32", v)
		if err != nil {
			t.Fatal(err)
		}
		tensors = append(tensors, convert.WriteTensor{Name: name, DType: "F32", Shape: shape, Data: data})
	}
	gauss := func(n int, std float64) []float32 {
		v := make([]float32, n)
		for i := range v {
			v[i] = float32(rng.NormFloat64() * std)
		}
		return v
	}
	proj := func(name string, rows, cols int) {
		std := 1 / float64(cols)
		v := gauss(rows*cols, std*4)
		if m.exact {
			for i := range v {
				v[i] = float32(rng.IntN(3)-1) * 0.0625
			}
		}
		add(name, []int64{int64(rows), int64(cols)}, v)
	}
	norm := func(name string, n int) {
		v := gauss(n, 0.1)
		for i := range v {
			v[i]++
		}
		add(name, []int64{int64(n)}, v)
	}
	q, kv := m.heads*m.headDim, m.kv*m.headDim
	add("model.embed_tokens.weight", []int64{int64(m.vocab), int64(m.hidden)}, gauss(m.vocab*m.hidden, 1))
	for l := range m.layers {
		p := fmt.Sprintf("model.layers.%d.", l)
		norm(p+"input_layernorm.weight", m.hidden)
		proj(p+"self_attn.q_proj.weight", q, m.hidden)
		proj(p+"self_attn.k_proj.weight", kv, m.hidden)
		proj(p+"self_attn.v_proj.weight", kv, m.hidden)
		if m.biases {
			add(p+"self_attn.q_proj.bias", []int64{int64(q)}, gauss(q, 0.1))
			add(p+"self_attn.k_proj.bias", []int64{int64(kv)}, gauss(kv, 0.1))
			add(p+"self_attn.v_proj.bias", []int64{int64(kv)}, gauss(kv, 0.1))
		}
		if m.innerNorms {
			norm(p+"self_attn.inner_norm.weight", q)
			norm(p+"mlp.inner_norm.weight", m.inter)
		}
		proj(p+"self_attn.o_proj.weight", m.hidden, q)
		norm(p+"post_attention_layernorm.weight", m.hidden)
		proj(p+"mlp.gate_proj.weight", m.inter, m.hidden)
		proj(p+"mlp.up_proj.weight", m.inter, m.hidden)
		proj(p+"mlp.down_proj.weight", m.hidden, m.inter)
	}
	norm("model.norm.weight", m.hidden)
	if !m.tied {
		add("lm_head.weight", []int64{int64(m.vocab), int64(m.hidden)}, gauss(m.vocab*m.hidden, 0.2))
	}
	tensors = append(tensors, convert.WriteTensor{Name: "train.step", DType: "I64", Shape: []int64{}, Data: make([]byte, 8)})
	path := filepath.Join(dir, "model.safetensors")
	if err := convert.WriteFile(path, tensors, nil); err != nil {
		t.Fatal(err)
	}
	return path
}

// packModel packs src with the given policy rules placed before the
// default policy, and returns the artifact's path.
func packModel(t testing.TB, src string, codec pack.Codec, rules ...string) string {
	s, err := convert.Open(src)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	pol := convert.DefaultPolicy()
	var rs []convert.Rule
	for _, r := range rules {
		rule, err := convert.ParseRule(r)
		if err != nil {
			t.Fatal(err)
		}
		rs = append(rs, rule)
	}
	pol.Rules = append(rs, pol.Rules...)
	dst := filepath.Join(filepath.Dir(src), "model.tkart")
	if _, err := pack.Build(s, dst, pack.Options{Codec: codec, Recipe: convert.DefaultRecipe(), Policy: pol}); err != nil {
		t.Fatal(err)
	}
	return dst
}

// probeBoth runs the artifact against its source.
func probeBoth(t testing.TB, m tinyModel, art, src, act string, seqs [][]int32) *Result {
	a, err := pack.Open(art)
	if err != nil {
		t.Fatal(err)
	}
	defer a.Close()
	aw, err := NewArtifactWeights(a, art, act)
	if err != nil {
		t.Fatal(err)
	}
	sw, err := OpenSource(src)
	if err != nil {
		t.Fatal(err)
	}
	defer sw.Close()
	res, err := Run(m.arch(t), aw, sw, seqs, Options{Activations: act})
	if err != nil {
		t.Fatal(err)
	}
	return res
}

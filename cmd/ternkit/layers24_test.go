package main

import (
	"fmt"
	"math/rand/v2"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/convert"
)

// writeDecoder writes a decoder-shaped BF16 checkpoint of the given depth
// with the common open layout's tensor names (model.embed_tokens,
// model.layers.N.self_attn.q_proj, …, lm_head; common practice), small
// widths and Gaussian weights, and returns its path.
func writeDecoder(t *testing.T, dir string, layers, width, ffn, vocab int) string {
	t.Helper()
	rng := rand.New(rand.NewPCG(24, uint64(layers)))
	gauss := func(n int, std float64) []float32 {
		v := make([]float32, n)
		for i := range v {
			v[i] = float32(rng.NormFloat64() * std)
		}
		return v
	}
	var tensors []convert.WriteTensor
	add := func(name string, shape []int64, v []float32) {
		data, err := convert.EncodeFloat32(nil, "BF16", v)
		require.NoError(t, err)
		tensors = append(tensors, convert.WriteTensor{Name: name, DType: "BF16", Shape: shape, Data: data})
	}
	ones := func(n int) []float32 {
		v := gauss(n, 0.05)
		for i := range v {
			v[i]++
		}
		return v
	}
	add("model.embed_tokens.weight", []int64{int64(vocab), int64(width)}, gauss(vocab*width, 1))
	for l := range layers {
		p := fmt.Sprintf("model.layers.%d.", l)
		add(p+"input_layernorm.weight", []int64{int64(width)}, ones(width))
		for _, proj := range []string{"q_proj", "k_proj", "v_proj", "o_proj"} {
			add(p+"self_attn."+proj+".weight", []int64{int64(width), int64(width)}, gauss(width*width, 0.02))
		}
		add(p+"post_attention_layernorm.weight", []int64{int64(width)}, ones(width))
		add(p+"mlp.gate_proj.weight", []int64{int64(ffn), int64(width)}, gauss(ffn*width, 0.02*(1+0.02*float64(l))))
		add(p+"mlp.up_proj.weight", []int64{int64(ffn), int64(width)}, gauss(ffn*width, 0.02))
		add(p+"mlp.down_proj.weight", []int64{int64(width), int64(ffn)}, gauss(ffn*width, 0.02))
	}
	add("model.norm.weight", []int64{int64(width)}, ones(width))
	add("lm_head.weight", []int64{int64(vocab), int64(width)}, gauss(vocab*width, 0.02))
	src := filepath.Join(dir, "decoder-24.safetensors")
	require.NoError(t, convert.WriteFile(src, tensors, map[string]string{"model": "fernmoss-scout-deep", "scenario": "Fernmoss Seed Vault (fictional)"}))
	return src
}

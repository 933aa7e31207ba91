package modelconfig

import (
	"fmt"
	"testing"

	"github.com/stretchr/testify/require"
)

// decoder lists the tensors of a decoder of the common layout.
func decoder(vocab, hidden, layers, heads, kvHeads, headDim, ffn int64, head bool) []Tensor {
	ts := []Tensor{{EmbedName, []int64{vocab, hidden}}}
	for i := range layers {
		p := fmt.Sprintf("model.layers.%d.", i)
		ts = append(ts,
			Tensor{p + "input_layernorm.weight", []int64{hidden}},
			Tensor{p + "self_attn.q_proj.weight", []int64{heads * headDim, hidden}},
			Tensor{p + "self_attn.k_proj.weight", []int64{kvHeads * headDim, hidden}},
			Tensor{p + "self_attn.v_proj.weight", []int64{kvHeads * headDim, hidden}},
			Tensor{p + "self_attn.o_proj.weight", []int64{hidden, heads * headDim}},
			Tensor{p + "mlp.gate_proj.weight", []int64{ffn, hidden}},
			Tensor{p + "mlp.up_proj.weight", []int64{ffn, hidden}},
			Tensor{p + "mlp.down_proj.weight", []int64{hidden, ffn}},
		)
	}
	if head {
		ts = append(ts, Tensor{HeadName, []int64{vocab, hidden}})
	}
	return ts
}

const goodConfig = `{"hidden_size": 256, "intermediate_size": 768, "num_hidden_layers": 4,
 "num_attention_heads": 4, "num_key_value_heads": 2, "head_dim": 64, "vocab_size": 2048}`

func TestCheck(t *testing.T) {
	c, err := Parse("config.json", []byte(goodConfig))
	require.NoError(t, err)
	require.Empty(t, c.Check(decoder(2048, 256, 4, 4, 2, 64, 768, true)))

	for _, tc := range []struct {
		name    string
		tensors []Tensor
		want    []string
	}{
		{"vocabulary", decoder(2000, 256, 4, 4, 2, 64, 768, true), []string{
			`config vocab_size = 2048, but tensor "model.embed_tokens.weight" has 2000 rows (and 1 more tensors)`}},
		{"layers", decoder(2048, 256, 3, 4, 2, 64, 768, true), []string{
			`config num_hidden_layers = 4, but tensor "model.layers.2.*" has the highest layer index 2 (3 layers)`}},
		{"kv heads", decoder(2048, 256, 4, 4, 4, 64, 768, true), []string{
			`config num_key_value_heads × head_dim = 128, but tensor "model.layers.0.self_attn.k_proj.weight" has 256 rows (and 7 more tensors)`}},
		{"intermediate", decoder(2048, 256, 1, 4, 2, 64, 512, true), []string{
			`config intermediate_size = 768, but tensor "model.layers.0.mlp.gate_proj.weight" has 512 rows (and 2 more tensors)`,
			`config num_hidden_layers = 4, but tensor "model.layers.0.*" has the highest layer index 0 (1 layers)`}},
		{"no head", decoder(2048, 256, 4, 4, 2, 64, 768, false), []string{
			`config tie_word_embeddings = false, but tensor "lm_head.weight" has no such tensor (an untied model needs its output head)`}},
	} {
		var got []string
		for _, m := range c.Check(tc.tensors) {
			got = append(got, m.String())
		}
		require.Equal(t, tc.want, got, tc.name)
	}

	tied, err := Parse("config.json", []byte(`{"hidden_size": 256, "vocab_size": 2048, "tie_word_embeddings": true}`))
	require.NoError(t, err)
	require.Empty(t, tied.Check(decoder(2048, 256, 2, 4, 2, 64, 768, false)), "tied: no head needed")

	other := []Tensor{{"encoder.block.0.w", []int64{3, 3}}, {"decoder.out", []int64{3, 3}}}
	require.False(t, KnownLayout(other))
	require.Empty(t, c.Check(other), "another layout: nothing checked")
	require.True(t, KnownLayout(decoder(2048, 256, 1, 4, 2, 64, 768, true)))
}

func TestSummary(t *testing.T) {
	c, err := Parse("config.json", []byte(`{"model_type": "fernmoss-scout", "hidden_size": 256, "intermediate_size": 768, "num_hidden_layers": 4,
 "num_attention_heads": 4, "num_key_value_heads": 2, "head_dim": 64, "vocab_size": 2048, "max_position_embeddings": 512,
 "rope_theta": 10000.0, "rms_norm_eps": 1e-05, "hidden_act": "silu", "tie_word_embeddings": false}`))
	require.NoError(t, err)
	require.Equal(t, "fernmoss-scout, 4 layers, hidden 256, MLP 768, 4 heads (2 KV) × 64, vocabulary 2048, context 512, rope theta 10000, norm eps 1e-05, silu, untied output head", c.Summary())
	c, err = Parse("config.json", []byte(`{"hidden_size": 256, "num_attention_heads": 4}`))
	require.NoError(t, err)
	require.Equal(t, "hidden 256, 4 heads × 64", c.Summary(), "head dim by the default rule")
}

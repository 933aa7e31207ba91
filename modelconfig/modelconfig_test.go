package modelconfig

import (
	"errors"
	"testing"

	"github.com/stretchr/testify/require"
)

func TestParseDefaults(t *testing.T) {
	// Common practice in open decoder-only configs: absent num_key_value_heads
	// means one KV head per attention head; absent head_dim means
	// hidden_size / num_attention_heads.
	c, err := Parse("config.json", []byte(`{"hidden_size": 256, "num_attention_heads": 4, "vocab_size": 2048, "rope_theta": 10000.0, "tie_word_embeddings": true, "hidden_act": "silu"}`))
	require.NoError(t, err)
	require.Equal(t, int64(4), c.NumKeyValueHeads)
	require.Equal(t, int64(64), c.HeadDim)
	require.Equal(t, 10000.0, c.RopeTheta)
	require.True(t, c.TieWordEmbeddings)
	require.Equal(t, "silu", c.HiddenAct)
	require.True(t, c.Has("vocab_size"))
	require.False(t, c.Has("head_dim"), "a default is not a given key")

	c, err = Parse("config.json", []byte(`{"hidden_size": 256, "num_attention_heads": 4, "num_key_value_heads": 2, "head_dim": 32}`))
	require.NoError(t, err)
	require.Equal(t, int64(2), c.NumKeyValueHeads)
	require.Equal(t, int64(32), c.HeadDim)
}

func TestParseErrors(t *testing.T) {
	for _, tc := range []struct{ in, want string }{
		{`[1]`, "not a JSON object"},
		{`{"hidden_size": "256"}`, `"hidden_size" is "256", not a number`},
		{`{"hidden_size": 2.5}`, `"hidden_size" is 2.5, not a non-negative integer`},
		{`{"vocab_size": -1}`, `"vocab_size" is -1, not a non-negative integer`},
		{`{"rope_theta": -1}`, `"rope_theta" is -1, not a finite non-negative number`},
		{`{"tie_word_embeddings": 1}`, `"tie_word_embeddings" is 1, not true or false`},
		{`{"hidden_act": 3}`, `"hidden_act" is 3, not a string`},
	} {
		_, err := Parse("c.json", []byte(tc.in))
		require.ErrorContains(t, err, tc.want, tc.in)
		require.ErrorContains(t, err, "c.json", tc.in)
	}
	_, err := Parse("tokenizer_config.json", []byte(`{"model_max_length": 512}`))
	require.True(t, errors.Is(err, ErrNotModelConfig), "%v", err)
	_, err = Parse("null.json", []byte(`null`))
	require.True(t, errors.Is(err, ErrNotModelConfig), "%v", err)
}

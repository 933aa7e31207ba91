package modelconfig

import (
	"testing"

	"github.com/stretchr/testify/require"
)

// A product of config values beyond int64 (a hostile or broken config) is
// a mismatch showing the true product, not a value wrapped around int64:
// (2^63-1)² wraps to 1, and 2^32 × 2^32 to 0, which skipped the check.
func TestCheckProductOverflow(t *testing.T) {
	tensors := decoder(2048, 256, 1, 4, 2, 64, 768, true)
	for _, tc := range []struct {
		config string
		want   []string
	}{
		{`{"num_attention_heads": 4, "num_key_value_heads": 9223372036854775807, "head_dim": 9223372036854775807}`, []string{
			`config num_attention_heads × head_dim = 36893488147419103228, but tensor "model.layers.0.self_attn.q_proj.weight" has 256 rows (and 1 more tensors)`,
			`config num_key_value_heads × head_dim = 85070591730234615847396907784232501249, but tensor "model.layers.0.self_attn.k_proj.weight" has 128 rows (and 1 more tensors)`,
		}},
		{`{"num_attention_heads": 4294967296, "num_key_value_heads": 2, "head_dim": 4294967296}`, []string{
			`config num_attention_heads × head_dim = 18446744073709551616, but tensor "model.layers.0.self_attn.q_proj.weight" has 256 rows (and 1 more tensors)`,
			`config num_key_value_heads × head_dim = 8589934592, but tensor "model.layers.0.self_attn.k_proj.weight" has 128 rows (and 1 more tensors)`,
		}},
	} {
		c, err := Parse("config.json", []byte(tc.config))
		require.NoError(t, err)
		var got []string
		for _, m := range c.Check(tensors) {
			got = append(got, m.String())
		}
		require.Equal(t, tc.want, got, tc.config)
	}
}

// Without head_dim, a head count that does not divide the query rows is a
// mismatch, even when hidden_size / heads gives no head dim to compare.
func TestCheckHeadsNotDividingQueryRows(t *testing.T) {
	tensors := decoder(2048, 256, 2, 4, 2, 64, 768, true)
	for _, tc := range []struct {
		config string
		want   []string
	}{
		{`{"hidden_size": 256, "num_attention_heads": 3}`, []string{
			`config num_attention_heads = 3, but tensor "model.layers.0.self_attn.q_proj.weight" has 256 rows, not a multiple of it (and 1 more tensors)`}},
		{`{"num_attention_heads": 3}`, []string{
			`config num_attention_heads = 3, but tensor "model.layers.0.self_attn.q_proj.weight" has 256 rows, not a multiple of it (and 1 more tensors)`}},
		{`{"hidden_size": 256, "num_attention_heads": 8}`, nil}, // 8 × 32: the shapes cannot tell
		{`{"hidden_size": 256, "num_attention_heads": 3, "head_dim": 64}`, []string{ // head_dim given: the product speaks
			`config num_attention_heads × head_dim = 192, but tensor "model.layers.0.self_attn.q_proj.weight" has 256 rows (and 3 more tensors)`}},
	} {
		c, err := Parse("config.json", []byte(tc.config))
		require.NoError(t, err)
		var got []string
		for _, m := range c.Check(tensors) {
			got = append(got, m.String())
		}
		require.Equal(t, tc.want, got, tc.config)
	}
}

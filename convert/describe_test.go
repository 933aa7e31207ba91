package convert

import (
	"testing"

	"github.com/stretchr/testify/require"
)

// Describe and ParseDescribedPolicy are inverse: the manifest's policy
// strings give back the rules that decided each tensor.
func TestParseDescribedPolicyRoundTrip(t *testing.T) {
	p := DefaultPolicy()
	for _, s := range []string{"*.mlp.*=ternary:group:64", "a = b=keep:f16", "x (odd)=int8", "*.q.weight=ternary:row"} {
		r, err := ParseRule(s)
		require.NoError(t, err)
		p.Rules = append(p.Rules, r)
	}
	p.Rules = append(p.Rules, Rule{Match: "w (2-D)", Dims: 3, DTypes: []string{"F16"}, Action: Action{Kind: ActKeepF32}})
	p.Rules = append(p.Rules, Rule{Match: "v", DTypes: []string{"F16", "BF16"}, Action: Action{Kind: ActKeepBF16}})
	got, err := ParseDescribedPolicy(p.Describe())
	require.NoError(t, err)
	require.Equal(t, p, got)
}

func TestParseDescribedRuleRejects(t *testing.T) {
	for _, s := range []string{"", "ternary *", "* =ternary", "* = ternary:group:0", "* = explode", " = keep", "[ = keep"} {
		_, err := ParseDescribedRule(s)
		require.ErrorIs(t, err, ErrPolicy, s)
	}
}

func FuzzParseDescribedRule(f *testing.F) {
	for _, s := range DefaultPolicy().Describe() {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		r, err := ParseDescribedRule(s)
		if err == nil && r.String() != s {
			t.Fatalf("%q reads as a rule describing itself as %q", s, r.String())
		}
	})
}

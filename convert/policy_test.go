package convert

import (
	"testing"

	"github.com/stretchr/testify/require"
)

func TestDefaultPolicy(t *testing.T) {
	cases := []struct {
		name  string
		dtype string
		shape []int64
		want  string
	}{
		{"blocks.0.attn.q.weight", "BF16", []int64{4, 4}, ActTernary},
		{"blocks.0.mlp.up.weight", "F32", []int64{8, 4}, ActTernary},
		{"embed.tokens.weight", "BF16", []int64{16, 4}, ActKeep},
		{"lm_head.weight", "F16", []int64{16, 4}, ActKeep},
		{"blocks.0.attn_norm.weight", "BF16", []int64{4}, ActKeep},
		{"blocks.0.conv.weight", "F32", []int64{4, 4, 3}, ActKeep},
		{"blocks.0.qmap", "I8", []int64{4, 4}, ActKeep},
		{"blocks.0.f8", "F8_E4M3", []int64{4, 4}, ActKeep},
	}
	p := DefaultPolicy()
	for _, c := range cases {
		a, _, err := p.Decide(&Tensor{Name: c.name, DType: c.dtype, Shape: c.shape})
		require.NoError(t, err)
		require.Equal(t, c.want, a.Kind, c.name)
	}
}

func TestParseAction(t *testing.T) {
	for _, s := range []string{"ternary", "ternary:row", "ternary:group:64", "keep", "keep:f16", "keep:bf16", "keep:f32", "int8"} {
		a, err := ParseAction(s)
		require.NoError(t, err, s)
		require.Equal(t, s, a.String())
	}
	a, err := ParseAction("ternary:tensor")
	require.NoError(t, err)
	require.Equal(t, "ternary", a.String())
	for _, s := range []string{"", "ternery", "keep:f8", "ternary:group:0", "ternary:col", "int4"} {
		_, err := ParseAction(s)
		require.ErrorIs(t, err, ErrPolicy, s)
		require.Contains(t, err.Error(), `"`+s+`"`)
	}
}

func TestParseRule(t *testing.T) {
	r, err := ParseRule("*.mlp.*=ternary:group:128")
	require.NoError(t, err)
	require.Equal(t, "*.mlp.*", r.Match)
	require.Equal(t, "ternary:group:128", r.Action.String())
	for _, s := range []string{"*.mlp.*", "=keep", "[*=keep", "*=explode"} {
		_, err := ParseRule(s)
		require.ErrorIs(t, err, ErrPolicy, s)
	}
}

// First match wins; integer and BOOL tensors are always kept, whatever the
// rules say; a float tensor no rule matches is kept.
func TestPolicyDecide(t *testing.T) {
	p := &Policy{Rules: []Rule{
		mustRule(t, "*.attn.*=ternary:row"),
		mustRule(t, "*.attn.q*=keep"), // shadowed by the rule before
		mustRule(t, "*embed*=int8"),
		mustRule(t, "*=ternary"),
	}}
	cases := []struct {
		name  string
		dtype string
		shape []int64
		want  string
		rule  int
	}{
		{"b.attn.q.weight", "BF16", []int64{4, 8}, "ternary:row", 0},
		{"tok.embed", "F32", []int64{16, 4}, "int8", 2},
		{"b.mlp.up", "F16", []int64{4, 4}, "ternary", 3},
		{"step", "I64", []int64{}, "keep", -1},
		{"mask", "BOOL", []int64{4, 4}, "keep", -1},
	}
	for _, c := range cases {
		a, i, err := p.Decide(&Tensor{Name: c.name, DType: c.dtype, Shape: c.shape})
		require.NoError(t, err, c.name)
		require.Equal(t, c.want, a.String(), c.name)
		require.Equal(t, c.rule, i, c.name)
	}
	// a dtype ternkit cannot decode: kept when a keep rule decides, an
	// error when a ternary rule matches it
	_, _, err := p.Decide(&Tensor{Name: "odd", DType: "Q4", Shape: []int64{4, 4}})
	require.ErrorIs(t, err, ErrDType)
	require.ErrorIs(t, err, ErrPolicy)
	require.Contains(t, err.Error(), `"Q4"`)
	a, i, err := (&Policy{Rules: []Rule{mustRule(t, "*=keep")}}).Decide(&Tensor{Name: "odd", DType: "Q4", Shape: []int64{4, 4}})
	require.NoError(t, err)
	require.Equal(t, ActKeep, a.Kind)
	require.Equal(t, 0, i)
	none := &Policy{Rules: []Rule{mustRule(t, "x=ternary")}}
	a, i, err = none.Decide(&Tensor{Name: "y", DType: "F32", Shape: []int64{2, 2}})
	require.NoError(t, err)
	require.Equal(t, ActKeep, a.Kind)
	require.Equal(t, -1, i)
}

// An action a tensor cannot take is an error naming the rule and the tensor.
func TestPolicyDecideErrors(t *testing.T) {
	cases := []struct {
		rule  string
		shape []int64
		want  string
	}{
		{"*=ternary", []int64{8}, "needs 2 or more dimensions"},
		{"*=int8", []int64{}, "needs 2 or more dimensions"},
		{"*=ternary:group:64", []int64{4, 96}, "multiple of 64"},
	}
	for _, c := range cases {
		p := &Policy{Rules: []Rule{mustRule(t, c.rule)}}
		_, _, err := p.Decide(&Tensor{Name: "blocks.0.norm", DType: "F32", Shape: c.shape})
		require.ErrorIs(t, err, ErrPolicy, c.rule)
		require.Contains(t, err.Error(), `"blocks.0.norm"`)
		require.Contains(t, err.Error(), c.rule[:1])
		require.Contains(t, err.Error(), c.want)
	}
}

func TestParsePolicyTOML(t *testing.T) {
	src := `
# comment
[[rule]]
match = "*embed*"
action = "int8"

[[rule]]
match = "*"
dims = 2
dtypes = ["F32", "BF16"]
action = "ternary:group:32"
`
	p, err := ParsePolicy("p.toml", []byte(src))
	require.NoError(t, err)
	require.Len(t, p.Rules, 2)
	require.Equal(t, 2, p.Rules[1].Dims)
	require.Equal(t, []string{"F32", "BF16"}, p.Rules[1].DTypes)
	a, _, err := p.Decide(&Tensor{Name: "w", DType: "F16", Shape: []int64{4, 32}})
	require.NoError(t, err)
	require.Equal(t, ActKeep, a.Kind, "F16 is not in the rule's dtypes")

	// TOML() writes what ParsePolicy reads back
	again, err := ParsePolicy("again", []byte(p.TOML()))
	require.NoError(t, err)
	require.Equal(t, p, again)
	def, err := ParsePolicy("default", []byte(DefaultPolicy().TOML()))
	require.NoError(t, err)
	require.Equal(t, DefaultPolicy(), def)

	bad := []struct{ text, want string }{
		{`[[rule]]` + "\n" + `match = "*"` + "\n" + `action = "ternary"` + "\n" + `granularity = "row"`, `unknown key "rule.granularity"`},
		{`[[rule]]` + "\n" + `match = "*"` + "\n" + `action = "binary"`, `"binary"`},
		{`[[rule]]` + "\n" + `match = "["` + "\n" + `action = "keep"`, `glob "["`},
		{`[[rule]]` + "\n" + `action = "keep"`, "empty glob"},
		{`# nothing`, "no [[rule]]"},
		{`[[rule]`, "p.toml"},
		{`[[rule]]` + "\n" + `match = "*"` + "\n" + `dims = -1` + "\n" + `action = "keep"`, "dims -1"},
	}
	for _, c := range bad {
		_, err := ParsePolicy("p.toml", []byte(c.text))
		require.ErrorIs(t, err, ErrPolicy, c.text)
		require.Contains(t, err.Error(), c.want, c.text)
		require.Contains(t, err.Error(), "p.toml", c.text)
	}
}

func TestPolicyUnmatched(t *testing.T) {
	p := &Policy{Rules: []Rule{mustRule(t, "*.q=ternary"), mustRule(t, "*.zz=keep")}}
	ts := []*Tensor{{Name: "a.q", DType: "F32", Shape: []int64{2, 2}}}
	un := p.Unmatched(ts)
	require.Len(t, un, 1)
	require.Equal(t, "*.zz", un[0].Match)
}

func FuzzParsePolicy(f *testing.F) {
	f.Add([]byte(DefaultPolicy().TOML()))
	f.Add([]byte("[[rule]]\nmatch = \"*\"\naction = \"ternary:group:8\"\n"))
	f.Fuzz(func(t *testing.T, b []byte) {
		p, err := ParsePolicy("fuzz", b)
		if err != nil {
			return
		}
		again, err := ParsePolicy("again", []byte(p.TOML()))
		if err != nil {
			t.Fatalf("policy written by TOML() is rejected: %v\n%s", err, p.TOML())
		}
		if len(again.Rules) != len(p.Rules) {
			t.Fatalf("%d rules, %d after a round trip", len(p.Rules), len(again.Rules))
		}
	})
}

func mustRule(t *testing.T, s string) Rule {
	t.Helper()
	r, err := ParseRule(s)
	require.NoError(t, err)
	return r
}

// dtype names in a policy are case-insensitive: safetensors headers write
// them in upper case ("BF16", the format description), and a policy's
// "bf16" means the same dtype rather than matching nothing.
func TestPolicyDTypesCaseInsensitive(t *testing.T) {
	p, err := ParsePolicy("p.toml", []byte("[[rule]]\nmatch = \"*\"\ndims = 2\ndtypes = [\"bf16\", \"F32\"]\naction = \"ternary\"\n"))
	require.NoError(t, err)
	require.Equal(t, []string{"BF16", "F32"}, p.Rules[0].DTypes)
	a, i, err := p.Decide(&Tensor{Name: "w", DType: "BF16", Shape: []int64{4, 4}})
	require.NoError(t, err)
	require.Equal(t, 0, i)
	require.Equal(t, ActTernary, a.Kind)
	require.Empty(t, p.Warnings())
}

func TestPolicyWarnings(t *testing.T) {
	p, err := ParsePolicy("p.toml", []byte("[[rule]]\nmatch = \"*\"\ndtypes = [\"BF61\", \"I8\"]\naction = \"keep\"\n"))
	require.NoError(t, err)
	w := p.Warnings()
	require.Len(t, w, 2)
	require.Contains(t, w[0], `dtype "BF61" is not one ternkit knows`)
	require.Contains(t, w[1], `dtype "I8" is never decided by rules`)
}

func TestUnknownActionError(t *testing.T) {
	_, err := ParseAction("ternery")
	var ue *UnknownActionError
	require.ErrorAs(t, err, &ue)
	require.Equal(t, "ternery", ue.Action)
	require.ErrorIs(t, err, ErrPolicy)
	require.Contains(t, err.Error(), `unknown action "ternery" (valid: ternary, ternary:row, ternary:group:N, keep`)
}

package convert

import (
	"path"
	"regexp"
	"strings"
	"testing"
	"unicode/utf8"

	"github.com/stretchr/testify/require"
)

func TestMatchGlob(t *testing.T) {
	cases := []struct {
		pattern, name string
		want          bool
	}{
		// '*' crosses '/': names are not paths
		{"*", "model/dense_1/kernel", true},
		{"model/*", "model/dense_1/kernel", true},
		{"*kernel", "model/dense_1/kernel", true},
		{"*/dense_*/*", "model/dense_1/kernel", true},
		{"?odel/dense_1/kernel", "model/dense_1/kernel", true},
		{"model?dense_1?kernel", "model/dense_1/kernel", true},
		{"blocks.*.mlp.*", "blocks.3.mlp.up.weight", true},
		{"blocks.*.mlp.*", "blocks.3.attn.q.weight", false},
		{"*embed*", "model.embed_tokens.weight", true},
		{"*embed*", "lm_head.weight", false},
		{"", "", true},
		{"", "a", false},
		{"a*b*c", "abc", true},
		{"a*b*c", "axxbyyc", true},
		{"a*b*c", "axxbyy", false},
		{"[a-c]x", "bx", true},
		{"[a-c]x", "dx", false},
		{"[^a-c]x", "dx", true},
		{"[^a-c]x", "ax", false},
		{"[/]x", "/x", true},
		{`a\*b`, "a*b", true},
		{`a\*b`, "axb", false},
		{"é?", "éü", true},
		{"**", "", true},
	}
	for _, c := range cases {
		got, err := MatchGlob(c.pattern, c.name)
		require.NoError(t, err, c.pattern)
		require.Equal(t, c.want, got, "%q on %q", c.pattern, c.name)
	}
	for _, bad := range []string{"[", "a[b", `a\`, "[]"} {
		_, err := MatchGlob(bad, "x")
		require.Error(t, err, bad)
	}
}

// On names without '/', MatchGlob agrees with path.Match (the Go
// standard library's glob), whose syntax it shares.
func TestMatchGlobAgreesWithPathMatchWithoutSlash(t *testing.T) {
	patterns := []string{"*", "a*", "*a", "a?c", "[ab]*", "[^ab]?", `\[x`, "*.*.*", "a*a*a"}
	names := []string{"", "a", "abc", "aaa", "[x", "b.c.d", "xyz", "a.a"}
	for _, p := range patterns {
		for _, n := range names {
			want, err := path.Match(p, n)
			require.NoError(t, err)
			got, err := MatchGlob(p, n)
			require.NoError(t, err)
			require.Equal(t, want, got, "%q on %q", p, n)
		}
	}
}

// globRegexp translates a glob of literals, '*' and '?' into an anchored
// regular expression (Go's regexp package, RE2 syntax): the oracle.
func globRegexp(p string) *regexp.Regexp {
	var b strings.Builder
	b.WriteString(`(?s)\A`)
	for _, r := range p {
		switch r {
		case '*':
			b.WriteString(`.*`)
		case '?':
			b.WriteString(`.`)
		default:
			b.WriteString(regexp.QuoteMeta(string(r)))
		}
	}
	b.WriteString(`\z`)
	return regexp.MustCompile(b.String())
}

func FuzzMatchGlob(f *testing.F) {
	f.Add("a*b", "axb")
	f.Add("[a-c]*?", "b/x/y")
	f.Add("*/*?", "model/dense_1/kernel")
	f.Fuzz(func(t *testing.T, p, n string) {
		got, err := MatchGlob(p, n)
		if err != nil || !utf8.ValidString(p) || !utf8.ValidString(n) || strings.ContainsAny(p, `[\`) {
			return
		}
		if want := globRegexp(p).MatchString(n); got != want {
			t.Fatalf("MatchGlob(%q, %q) = %v, the regular expression says %v", p, n, got, want)
		}
	})
}

package textsafe

import (
	"strconv"
	"testing"

	"github.com/stretchr/testify/require"
)

func TestEscape(t *testing.T) {
	cases := map[string]string{
		"blocks.0.attn.q.weight": "blocks.0.attn.q.weight",
		"model/dense_1/kernel":   "model/dense_1/kernel",
		"gewächs.ü":              "gewächs.ü",
		"a\x1b[2Jb":              `a\x1b[2Jb`,
		"ok\rFAKE":               `ok\rFAKE`,
		"tab\there\nnl":          `tab\there\nnl`,
		"del\x7f":                `del\x7f`,
		"c1\u0085\u009b":         `c1\u0085\u009b`,
		"bad\xffutf8":            `bad\xffutf8`,
		"\x00":                   `\x00`,
		"\u00a0nbsp stays":       "\u00a0nbsp stays",
		// bidirectional overrides and isolates reorder what a terminal
		// shows ("txt.exe" can read as "exe.txt"): UAX #9's formatting
		// characters are escaped
		"config\u202etxt.json": `config\u202etxt.json`,
		"a\u2066b\u2069":       `a\u2066b\u2069`,
		"rlm\u200f":            `rlm\u200f`,
		"אבג.json":             "אבג.json",
	}
	for in, want := range cases {
		require.Equal(t, want, Escape(in), strconv.Quote(in))
	}
}

func TestEscapeLines(t *testing.T) {
	require.Equal(t, "two\n\tlines \\x1b[0m\\r", EscapeLines("two\n\tlines \x1b[0m\r"))
}

func FuzzEscape(f *testing.F) {
	f.Add("a\x1b[31mred")
	f.Fuzz(func(t *testing.T, s string) {
		for _, r := range Escape(s) {
			if isControl(r) || r == 0xfffd && !containsRune(s, r) {
				t.Fatalf("Escape(%q) = %q holds %U", s, Escape(s), r)
			}
		}
	})
}

func containsRune(s string, r rune) bool {
	for _, c := range s {
		if c == r {
			return true
		}
	}
	return false
}

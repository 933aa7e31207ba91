package manifest

import (
	"testing"

	"github.com/stretchr/testify/require"
)

// The surrogate rule at the edges of its ranges (the Unicode Standard:
// high surrogates U+D800–U+DBFF, low surrogates U+DC00–U+DFFF; RFC 8259
// §7 writes a character above U+FFFF as the escapes of such a pair), with
// hex digits of either case, and at the end of the text.
func TestCheckSurrogatesAtTheEdges(t *testing.T) {
	for _, tc := range []struct {
		json string
		ok   bool
	}{
		{`{"a":"\ud7ff"}`, true},         // just below the surrogates
		{`{"a":"\ue000"}`, true},         // just above
		{`{"a":"\uffff"}`, true},         // a noncharacter, not a surrogate
		{`{"a":"\ud800\udc00"}`, true},   // the lowest pair: U+10000
		{`{"a":"\udbff\udfff"}`, true},   // the highest pair: U+10FFFF
		{`{"a":"\udbff\udc00"}`, true},   // highest high, lowest low
		{`{"a":"\uDbFf\uDfFf"}`, true},   // mixed-case digits
		{`{"a":"\ud800\udbff"}`, false},  // a high, then another high
		{`{"a":"\udbff\ue000"}`, false},  // a high, then no surrogate
		{`{"a":"\udbff\udbff"}`, false},  // a high twice
		{`{"a":"\ud7ff\udc00"}`, false},  // no high before the low
		{`{"a":"\udfff"}`, false},        // the last low alone
		{`{"a":"\udbffx\udc00"}`, false}, // not directly followed
	} {
		err := checkSurrogates([]byte(tc.json))
		require.Equal(t, tc.ok, err == nil, "%s: %v", tc.json, err)
		if !tc.ok {
			require.ErrorIs(t, err, ErrInvalid, tc.json)
			require.Contains(t, err.Error(), "lone surrogate escape", tc.json)
		}
	}
	// cut short right after an escape: judged on what is there, never
	// read past the end
	for _, in := range []string{`{"a":"\ud800`, `{"a":"\ud800\`, `{"a":"\ud800\u`, `{"a":"\ud800\udc`} {
		err := checkSurrogates([]byte(in))
		require.ErrorIs(t, err, ErrInvalid, in)
		require.Contains(t, err.Error(), "lone surrogate escape \\ud800 at byte 6", in)
	}
	for _, in := range []string{`{"a":"\ud8`, `{"a":"\u`, `{"a":"\`} {
		require.NoError(t, checkSurrogates([]byte(in)), "%q: not a complete escape: the JSON decoder rejects it", in)
	}
}

// Companion names: characters below U+0020 and U+007F are refused; the
// space and everything above it are not.
func TestCompanionNameControlEdges(t *testing.T) {
	require.NoError(t, CheckCompanionName(" config.json"))
	require.NoError(t, CheckCompanionName("~notes.txt"))
	require.NoError(t, CheckCompanionName("\u0080.txt"))
	for _, name := range []string{"a\x1f.json", "a\x7f.json", "\x00"} {
		require.ErrorContains(t, CheckCompanionName(name), "holds control character", "%q", name)
	}
}

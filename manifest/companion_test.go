package manifest

import (
	"testing"

	"github.com/stretchr/testify/require"
)

func TestCheckCompanionName(t *testing.T) {
	for _, tc := range []struct {
		name string
		ok   bool
	}{
		{"config.json", true},
		{".hidden", true},
		{"Lizenz-Übersicht.md", true},
		{"", false},
		{".", false},
		{"..", false},
		{"a/b", false},
		{`a\b`, false},
		{"../config.json", false},
		{"tab\tname", false},
		{"del\x7f", false},
		{"nul\x00", false},
		{"\xff.json", false},
		{string(make([]byte, 256)), false},
	} {
		err := CheckCompanionName(tc.name)
		require.Equal(t, tc.ok, err == nil, "%q: %v", tc.name, err)
	}
	long := make([]byte, MaxCompanionName)
	for i := range long {
		long[i] = 'a'
	}
	require.NoError(t, CheckCompanionName(string(long)))
	require.Error(t, CheckCompanionName(string(long)+"a"))
}

// A \u escape of a surrogate is allowed only as a high one followed by a
// low one (the Python json module keeps lone surrogates, Go's replaces
// them: the format rejects them so that readers agree).
func TestCheckSurrogates(t *testing.T) {
	for _, tc := range []struct {
		json string
		ok   bool
	}{
		{`{"a":"plain"}`, true},
		{`{"a":"\ud83c\udf31"}`, true},
		{`{"a":"\uD83C\uDF31"}`, true},
		{`{"a":"\u00e9\\ud800"}`, true}, // an escaped backslash, then text
		{`{"a":"\ud800"}`, false},
		{`{"a":"\udc00"}`, false},
		{`{"a":"\ud800x"}`, false},
		{`{"a":"\ud800\u0041"}`, false},
		{`{"a":"\udc00\ud800"}`, false},
		{`{"\udfff":1}`, false},
		{`{"a":"\ud800\ud800"}`, false},
	} {
		err := checkSurrogates([]byte(tc.json))
		require.Equal(t, tc.ok, err == nil, "%s: %v", tc.json, err)
	}
}

package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"testing"

	"github.com/stretchr/testify/require"

	"ternkit/report"
)

// inspect and report show the companions and the config's architecture.
func TestInspectCompanions(t *testing.T) {
	dir := t.TempDir()
	_, art := demoArtifact(t, dir)
	code, out, errOut := ternkit("inspect", art)
	require.Equal(t, exitOK, code, errOut)
	require.Contains(t, out, "architecture     fernmoss-scout, 4 layers, hidden 256, MLP 768, 4 heads (2 KV) × 64, vocabulary 2048,")
	require.Contains(t, out, "companions       config.json (427 B), vocab.json (")
	require.Contains(t, out, "policy           model.embed_tokens.weight = int8;", "the manifest records the demo's own policy")

	code, out, errOut = ternkit("inspect", art, "--json")
	require.Equal(t, exitOK, code, errOut)
	var s report.Summary
	require.NoError(t, json.Unmarshal([]byte(out), &s))
	require.Len(t, s.Companions, 2)
	require.Equal(t, "config.json", s.Companions[0].Name)
	require.NotNil(t, s.Architecture)
	require.Equal(t, int64(demoVocab), s.Architecture.VocabSize)
	require.Equal(t, int64(demoKVHeads), s.Architecture.NumKeyValueHeads)

	page := filepath.Join(dir, "page.html")
	code, _, errOut = ternkit("report", art, "-o", page)
	require.Equal(t, exitOK, code, errOut)
	b, err := os.ReadFile(page)
	require.NoError(t, err)
	require.Contains(t, string(b), "<h2>Release files</h2>")
	require.Contains(t, string(b), "Architecture (config.json): fernmoss-scout, 4 layers")
	require.Contains(t, string(b), `<td class="name">vocab.json</td>`)
}
